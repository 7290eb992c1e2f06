"""Fuzzed case files: hypothesis mutates the shipped cases (a value's type, number or unit; a missing or an
extra key) and every outcome must be a valid case or the tool's own one-line error (exit code 2), never a
traceback.

The default profile checks the loader (fast, a few hundred cases); the slow one runs every mutated case
through the command line, meshing and solving included, with small time and node limits.
"""

from __future__ import annotations

import datetime
import math
import subprocess
import sys
import tomllib
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from conftest import GEOMETRIES
from fieldsection.case import Case, case_from_mapping
from fieldsection.errors import FieldSectionError

SHIPPED = {path.stem: tomllib.loads(path.read_text(encoding="utf-8")) for path in sorted(GEOMETRIES.glob("*.toml"))}
SHIPPED = {name: data for name, data in SHIPPED.items() if isinstance(data.get("geometry"), dict)}  # cases, not studies

AWKWARD_TEXT = ["1/0 kV", "10**10**10 V", "(1 kV", "1e999 V", "1e308 GV", "-1 mm", "0 mm", "1 nm", "nan", "inf V",
                "12 kV", "2 mm", "20 kV/mm", "1 atm", "1 kV kV", "kV", "auto", "direct", "grounded", "open", "planar",
                "axisymmetric", "PTFE", "air", "", " ", "true", "1_000 V", "3 um", "5 µm", "1e-15 S/m", "50 Hz",
                "x" * 200, "\u2622 kV", "0x10 V", "1 V**2", "1 V^99"]
scalars = st.one_of(
    st.sampled_from(AWKWARD_TEXT),
    st.text(max_size=12),
    st.booleans(),
    st.integers(min_value=-(10**20), max_value=10**20),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0, 1, 2, 3, 7, -1, 0.5, 1e-9, 1e9, 1e300]),
    st.just(datetime.date(2026, 1, 1)),
)
values = st.one_of(scalars, st.lists(scalars, max_size=3), st.dictionaries(st.text(max_size=6), scalars, max_size=2))


def _paths(tree: dict, prefix: tuple = ()) -> list[tuple]:
    out = []
    for key, value in tree.items():
        out.append(prefix + (key,))
        if isinstance(value, dict):
            out += _paths(value, prefix + (key,))
    return out


@st.composite
def mutated_cases(draw) -> tuple[str, dict]:
    name = draw(st.sampled_from(sorted(SHIPPED)))
    data = _copy(SHIPPED[name])
    for _ in range(draw(st.integers(min_value=1, max_value=3))):
        paths = _paths(data)
        path = draw(st.sampled_from(paths))
        parent = data
        for key in path[:-1]:
            parent = parent[key]
        action = draw(st.sampled_from(["replace", "replace", "delete", "add"]))
        if action == "replace":
            parent[path[-1]] = draw(values)
        elif action == "delete":
            del parent[path[-1]]
        else:
            target = parent[path[-1]] if isinstance(parent[path[-1]], dict) else parent
            target[draw(st.sampled_from(["extra", "size", "potential", "kind", "fraction", "method", "copies"]))] = \
                draw(values)
    return name, data


def _copy(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _copy(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_copy(v) for v in value]
    return value


def _load(name: str, data: dict) -> Case | FieldSectionError:
    try:
        return case_from_mapping(data, name=name, base_dir=GEOMETRIES, where=f"{name}.toml")
    except FieldSectionError as exc:
        return exc


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated_cases())
def test_mutated_shipped_cases_load_or_fail_with_the_tools_error(case):
    name, data = case
    outcome = _load(name, data)  # any other exception fails the test with its traceback
    if isinstance(outcome, FieldSectionError):
        message = str(outcome)
        assert message and "\n" not in message, f"not a one-line message: {message!r}"
    else:
        assert isinstance(outcome, Case)


def test_the_shipped_cases_load_unchanged():
    # guards the fuzzing above: each starting point is a valid case
    assert SHIPPED, "no shipped case files found"
    for name, data in SHIPPED.items():
        assert isinstance(_load(name, _copy(data)), Case), name


def _toml(data: dict) -> str:
    """A small TOML writer for the fuzzed tables (values are what tomllib can produce)."""
    def value(v: Any) -> str:
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, float):
            return "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf") if math.isinf(v) else repr(v)
        if isinstance(v, int):
            return str(v)
        if isinstance(v, str):
            return '"' + v.replace("\\", "\\\\").replace('"', '\\"').encode("unicode_escape").decode("ascii")\
                .replace('\\\\\\\\', '\\\\') + '"'
        if isinstance(v, (datetime.date, datetime.datetime)):
            return v.isoformat()
        if isinstance(v, list):
            return "[" + ", ".join(value(x) for x in v) + "]"
        if isinstance(v, dict):
            return "{" + ", ".join(f"{_key(k)} = {value(x)}" for k, x in v.items()) + "}"
        raise TypeError(type(v))

    def table(tree: dict, prefix: str) -> list[str]:
        lines = [f"{_key(k)} = {value(v)}" for k, v in tree.items() if not isinstance(v, dict)]
        for k, v in tree.items():
            if isinstance(v, dict):
                name = f"{prefix}.{_key(k)}" if prefix else _key(k)
                lines += [f"[{name}]", *table(v, name)]
        return lines

    return "\n".join(table(data, "")) + "\n"


def _key(k: str) -> str:
    return k if k and all(c.isalnum() or c in "-_" for c in k) else '"' + k.encode("unicode_escape").decode("ascii")\
        .replace('"', '\\"') + '"'


@pytest.mark.slow
@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated_cases())
def test_mutated_shipped_cases_run_or_fail_with_exit_code_2(tmp_path_factory, case):
    name, data = case
    folder = tmp_path_factory.mktemp("fuzz")
    text = _toml(data)
    try:
        tomllib.loads(text)
    except tomllib.TOMLDecodeError:
        return  # the writer above cannot express this mutation; the loader test covers it
    path = GEOMETRIES / f".fuzz-{folder.name}.toml"  # beside the scripts it names
    path.write_text(text, encoding="utf-8")
    try:
        done = subprocess.run(
            [sys.executable, "-c", "import sys; from fieldsection.cli import main; sys.exit(main(sys.argv[1:]))",
             "run", str(path), "--reports", str(folder / "reports"), "--quiet", "--no-figures",
             "--time-limit", "120", "--max-nodes", "300000"],
            capture_output=True, text=True, timeout=900, cwd=Path(__file__).resolve().parent.parent)
    finally:
        path.unlink()
    assert done.returncode in (0, 2), done.stderr
    assert "Traceback" not in done.stderr
    if done.returncode == 2:
        assert len([line for line in done.stderr.splitlines() if line.strip()]) == 1, done.stderr
