"""Design studies on a coaxial line, against the closed forms.

Sources: C = 2 pi eps0 eps_r / ln(b/a) and the inner-surface field E(a) = V / (a ln(b/a)) by Gauss's
law (e.g. D. M. Pozar, Microwave Engineering, 4th ed., Wiley 2012, Table 2.1; from memory, as in
test_coaxial.py). For a fixed outer radius b the inner-surface field is smallest at b/a = e (set
d/da [a ln(b/a)] = ln(b/a) - 1 = 0; the classic result of HV engineering textbooks, from memory).
"""

from __future__ import annotations

import json
import math
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from scipy.constants import epsilon_0

from fieldsection.cli import main
from fieldsection.study import StudyError, load_study, range_values
from fieldsection.study_run import cache_folder, run_study
from fieldsection.study import run_settings

ROOT = Path(__file__).resolve().parent.parent
GEOMETRIES = ROOT / "geometries"
EPS_R_AIR = 1.00059  # the shipped 'air' entry (materials.toml); the test reads it back below
V, A = 1000.0, 1e-3  # 1 kV on an inner conductor of radius 1 mm

BASE_CASE = """
[geometry]
script = "coaxial.geo"
length_unit = "mm"
[geometry.parameters]
r_inner = 1.0
r_outer = 3.0
lc = {lc}
[regions]
insulation = "air"
[electrodes]
inner = "1 kV"
outer = "0 V"
[refinement]
adaptive = false
"""


def _folder(tmp_path: Path, study: str, lc: float = 0.2) -> Path:
    """A study folder with its own copy of the coaxial script and a base case on one P2 mesh."""
    folder = tmp_path / "study"
    folder.mkdir(exist_ok=True)
    shutil.copy(GEOMETRIES / "coaxial.geo", folder / "coaxial.geo")
    (folder / "coax.toml").write_text(BASE_CASE.format(lc=lc), encoding="utf-8")
    (folder / "coax_study.toml").write_text(study, encoding="utf-8")
    return folder / "coax_study.toml"


SWEEP = """
title = "coaxial line over b/a"
case = "coax.toml"
[[vary]]
set = "geometry.parameters.r_outer"
values = [1.5, 2.0, 3.0, 5.0]
"""


def _air_permittivity() -> float:
    from fieldsection.materials import shipped_materials

    return shipped_materials()["air"].relative_permittivity


def _numbers(table):
    """The table without the timing column (which differs between runs)."""
    return [{k: v for k, v in row.items() if k != "seconds"} for row in table.rows]


@pytest.fixture(scope="module")
def sweep(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("sweep")
    path = _folder(tmp, SWEEP)
    study = load_study(path)
    outcome = run_study(study, tmp / "reports", settings=run_settings(workers=2))
    return study, outcome, tmp


def test_sweep_capacitance_equals_closed_form_within_1e_5(sweep):
    _, outcome, _ = sweep
    eps = epsilon_0 * _air_permittivity()
    rows = outcome.table.rows
    assert [r["status"] for r in rows] == ["ok"] * 4
    for row in rows:
        b_over_a = row["geometry.parameters.r_outer"] / 1.0
        exact = 2 * math.pi * eps / math.log(b_over_a) * 1e12  # pF/m (Pozar, from memory)
        assert row["C_between_levels_pF_per_m"] == pytest.approx(exact, rel=1e-5)
        assert row["C_mutual[inner|outer]_pF_per_m"] == pytest.approx(exact, rel=1e-5)
    # monotone as the formula says: C falls as b/a grows
    C = outcome.table.column("C_between_levels_pF_per_m")
    assert all(np.diff(C) < 0)


def test_sweep_table_and_report_folder(sweep):
    study, outcome, tmp = sweep
    folder = outcome.folder
    assert folder == tmp / "reports" / "coax_study"
    data = json.loads((folder / "table.json").read_text())
    assert data["summary"] == {"variants": 4, "succeeded": 4, "failed": 0}
    assert data["columns"] == outcome.table.columns
    header = (folder / "table.csv").read_text().splitlines()[0].split(",")
    assert "C_between_levels_pF_per_m" in header and "peak_E[insulation]_kV_per_mm" in header
    assert len((folder / "table.csv").read_text().splitlines()) == 5
    index = (folder / "index.html").read_text()
    for name in ("v001", "v002", "v003", "v004"):
        assert f'href="variants/{name}/report.html"' in index
        assert (folder / "variants" / name / "report.html").is_file()
    assert "not a certification" in index
    assert list((folder / "plots").glob("*.png"))
    # nothing half-written left beside it
    assert not list((tmp / "reports").glob(".coax_study.partial-*"))


def test_rerun_reads_every_variant_from_the_cache(sweep):
    study, outcome, tmp = sweep
    again = run_study(study, tmp / "reports", settings=run_settings(workers=2))
    assert again.log.ran == [] and sorted(again.log.cached) == ["v001", "v002", "v003", "v004"]
    assert _numbers(again.table) == _numbers(outcome.table)
    assert again.table.column("seconds") == outcome.table.column("seconds")  # the cached records' own times


def test_local_cluster_gives_the_same_table(sweep, tmp_path):
    distributed = pytest.importorskip("distributed")
    study, outcome, _ = sweep
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        on_dask = run_study(study, tmp_path / "reports",
                            settings=run_settings(workers=2, scheduler=cluster.scheduler_address))
    assert sorted(on_dask.log.ran) == ["v001", "v002", "v003", "v004"]
    assert _numbers(on_dask.table) == _numbers(outcome.table)


def test_failed_variant_is_recorded_and_the_study_goes_on(tmp_path, capsys):
    path = _folder(tmp_path, """
case = "coax.toml"
[[vary]]
set = "geometry.parameters.r_inner"
values = [1.0, 4.0]   # 4 mm is outside the 3 mm outer conductor: no insulation left to mesh
""")
    code = main(["study", str(path), "--reports", str(tmp_path / "reports"), "--workers", "1"])
    out = capsys.readouterr().out
    assert code == 0
    assert "2 variant(s): 1 succeeded, 1 failed" in out
    table = json.loads((tmp_path / "reports" / "coax_study" / "table.json").read_text())
    ok, bad = table["rows"]
    assert ok["status"] == "ok" and bad["status"] == "failed"
    assert bad["error_type"] == "GeometryError" and "no surfaces" in bad["error"]
    assert table["summary"]["failed"] == 1
    # the failure is cached: a rerun does not compute it again
    again = run_study(load_study(path), tmp_path / "reports", settings=run_settings(workers=1))
    assert again.log.ran == []


def test_search_smallest_outer_radius_for_a_field_limit(tmp_path):
    # the smallest b with E(a) = V / (a ln(b/a)) <= 0.7 kV/mm is b = a exp(V / (a E)) = e^(1/0.7) mm
    path = _folder(tmp_path, """
case = "coax.toml"
[search]
set = "geometry.parameters.r_outer"
from = 4.05
to = 4.35
tolerance = 0.005
output = "peak_E[insulation]_kV_per_mm"
at_most = 0.7
find = "smallest"
scan = 3
""", lc=0.15)
    outcome = run_study(load_study(path), tmp_path / "reports", settings=run_settings(workers=2))
    found = outcome.search
    exact = math.exp(1 / 0.7)  # mm (Gauss's law, as above)
    assert found.met
    # the tolerance 0.005 mm plus the peak field's discretisation error (about +8e-4 relative at lc = 0.15 mm,
    # measured; i.e. ln(b/a) * 8e-4 * b = 0.005 mm in b)
    assert found.value == pytest.approx(exact, abs=0.012)
    assert found.iterations >= 2  # narrowed by k-section, not read off the scan
    assert found.certificates == {"insulation": "single mesh"}
    assert json.loads((outcome.folder / "search.json").read_text())["met"] is True


@pytest.mark.slow  # Brent's method is sequential: about 15 variants one after the other
def test_search_optimum_inner_radius_gives_b_over_a_equal_e(tmp_path):
    # for fixed b = 3 mm the inner-surface field is smallest at a = b / e (classic result, from memory);
    # the minimum is flat (E rises as x^2 / 2 for a relative offset x): a field error varying by d between
    # neighbouring meshes can move it by sqrt(2 d); at lc = 0.1 mm the peak's error is about 2e-4 (measured),
    # varying by well under that, so 2 % in a (2e-4 in E); b/a = 2 or 3 would be 26 % or 10 % off
    path = _folder(tmp_path, """
case = "coax.toml"
[search]
set = "geometry.parameters.r_inner"
from = 0.8
to = 1.5
tolerance = 0.003
output = "peak_E[insulation]_kV_per_mm"
goal = "minimum"
""", lc=0.1)
    outcome = run_study(load_study(path), tmp_path / "reports", settings=run_settings(workers=2))
    found = outcome.search
    assert found.met
    assert 3.0 / found.value == pytest.approx(math.e, rel=2e-2)


def test_search_that_cannot_be_met_says_so(tmp_path):
    path = _folder(tmp_path, """
case = "coax.toml"
[search]
set = "geometry.parameters.r_outer"
from = 2.0
to = 3.0
tolerance = 0.01
output = "peak_E[insulation]_kV_per_mm"
at_most = 0.1
scan = 3
""")
    outcome = run_study(load_study(path), tmp_path / "reports", settings=run_settings(workers=1))
    assert not outcome.search.met and outcome.search.value is None
    assert "not met anywhere in the range [2, 3]" in outcome.search.message


def _stored(cache: Path) -> list[str]:
    """Keys of the variants stored whole in the cache (not a staging folder a kill interrupted)."""
    return sorted(d.name for d in cache.iterdir() if not d.name.startswith(".") and (d / "record.json").is_file())


def test_kill_9_then_rerun_computes_only_the_missing_variants(tmp_path):
    path = _folder(tmp_path, """
case = "coax.toml"
[[vary]]
set = "geometry.parameters.r_outer"
values = [2.0, 2.5, 3.0, 3.5]
""")
    reports = tmp_path / "reports"
    cache = reports / ".coax_study.cache"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    child = subprocess.Popen([sys.executable, "-m", "fieldsection.cli", "study", str(path), "--reports", str(reports),
                              "--workers", "1", "--quiet"], env=env, start_new_session=True,
                             stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 60
    try:
        while time.monotonic() < deadline and child.poll() is None:
            if cache.is_dir() and _stored(cache):
                break
            time.sleep(0.02)
    finally:
        os.killpg(child.pid, signal.SIGKILL)  # the child and the meshing process it may have forked
        child.wait()
    done = _stored(cache)
    assert 1 <= len(done) < 4, "the kill must land in the middle of the study"
    assert not (reports / "coax_study").exists()  # no report was written by the killed run

    study = load_study(path)
    resumed = run_study(study, reports, settings=run_settings(workers=1))
    assert len(resumed.log.cached) == len(done)
    assert len(resumed.log.ran) == 4 - len(done)
    log = (resumed.folder / "run.log").read_text()
    ran_lines = [line for line in log.splitlines() if " ran v" in line]
    assert len(ran_lines) == 4  # the killed run's finished variants and the rerun's, each once

    uninterrupted = run_study(study, tmp_path / "fresh", settings=run_settings(workers=1))
    assert _numbers(resumed.table) == _numbers(uninterrupted.table)


def test_range_values_linear_log_and_units():
    assert range_values({"from": 1, "to": 3, "count": 3}, "vary[0]") == [1.0, 2.0, 3.0]
    assert range_values({"from": 1, "to": 100, "count": 3, "spacing": "log", "unit": "kV"}, "vary[0]") == \
        ["1 kV", "10 kV", "100 kV"]


def test_zipped_group_and_product_of_axes(tmp_path):
    path = _folder(tmp_path, """
case = "coax.toml"
[[vary]]
set = "geometry.parameters.r_outer"
values = [2.0, 3.0, 4.0]
[[vary]]
label = "voltage"
together = { "electrodes.inner" = ["1 kV", "2 kV"], "electrodes.outer" = ["0 V", "-1 kV"] }
""")
    variants = load_study(path).variants()
    assert len(variants) == 6
    assert variants[1].settings == {"geometry.parameters.r_outer": 2.0, "electrodes.inner": "2 kV",
                                    "electrodes.outer": "-1 kV"}
    assert variants[1].mapping["electrodes"] == {"inner": "2 kV", "outer": "-1 kV"}
    assert variants[5].mapping["geometry"]["parameters"]["r_outer"] == 4.0


@pytest.mark.parametrize("study, message", [
    ('case = "coax.toml"\n[[vary]]\nset = "geometry.parameters.r_outer"\nvalues = [2.0]\nstep = 1\n',
     r"vary\[0\]: unknown key 'step'"),
    ('case = "coax.toml"\n[[vary]]\nlabel = "v"\ntogether = { "electrodes.inner" = ["1 kV"], '
     '"electrodes.outer" = ["0 V", "1 V"] }\n', r"same length to be zipped \(electrodes.inner: 1, electrodes.outer: 2\)"),
    ('case = "coax.toml"\n[[vary]]\nset = "geomtry.parameters.r_outer"\nvalues = [2.0]\n',
     r"study key 'geomtry.parameters.r_outer': give a dotted case key starting with one of"),
    ('case = "missing.toml"\n', r"base case .*missing.toml' not found"),
    ('case = "coax.toml"\n[[vary]]\nset = "electrodes.inner"\nvalues = ["1 kV", "2 parsecs"]\n',
     r"variant v002 \(electrodes.inner = '2 parsecs'\): electrodes.inner"),
    ('case = "coax.toml"\n[search]\nset = "geometry.parameters.r_outer"\nfrom = 2.0\nto = 3.0\ntolerance = 0.1\n'
     'output = "peak_E[insulation]_kV_per_mm"\n', r"\[search\]: give exactly one of at_most, at_least, equal or goal"),
])
def test_bad_study_file_exit_2_one_line_no_report(tmp_path, capsys, study, message):
    path = _folder(tmp_path, study)
    code = main(["study", str(path), "--reports", str(tmp_path / "reports")])
    err = capsys.readouterr().err
    assert code == 2
    assert len(err.strip().splitlines()) == 1
    import re

    assert re.search(message, err), err
    assert not (tmp_path / "reports" / "coax_study").exists()


def test_bad_workers_option_exit_2(tmp_path, capsys):
    path = _folder(tmp_path, SWEEP)
    assert main(["study", str(path), "--reports", str(tmp_path / "reports"), "--workers", "0"]) == 2
    assert "--workers = 0: a whole number of at least 1" in capsys.readouterr().err
    with pytest.raises(StudyError, match=r"run.max_dofs = 5: a whole number of at least 100"):
        run_settings(max_dofs=5, prefix="run.")


def test_study_dof_budget_reaches_every_variant(tmp_path):
    path = _folder(tmp_path, SWEEP + "[run]\nmax_dofs = 5000\n")
    for variant in load_study(path).variants():
        assert variant.mapping["refinement"]["max_dofs"] == 5000
    assert cache_folder(load_study(path), tmp_path).name == ".coax_study.cache"


def test_cache_key_follows_the_script_text_and_a_worker_without_the_folder_computes(tmp_path):
    from fieldsection.study_run import Runner, compute_variant

    path = _folder(tmp_path, SWEEP)
    study = load_study(path)
    variant = study.variants()[0]
    with Runner(study, tmp_path / "cache", run_settings(workers=1)) as runner:
        before = runner.task(variant)
        script = path.parent / "coaxial.geo"
        script.write_text(script.read_text() + "\n// an edit that changes nothing but the text\n")
        after = runner.task(variant)
    assert before.key != after.key  # the input key hashes the script's text
    # a worker on another machine has no study folder: it computes from the shipped script text
    from dataclasses import replace

    record, files = compute_variant(replace(after, base_dir=str(tmp_path / "not here")))
    assert record["status"] == "ok", record.get("error")
    assert "results.json" in files


class _FormulaRunner:
    """Stands in for the study runner: each value's record comes from a formula (tests the search logic alone)."""

    def __init__(self, study, formula, workers=2):
        self.study, self.formula, self.workers, self.records = study, formula, workers, {}
        self.cache = self

    def evaluate(self, variants, what=""):
        out = []
        for v in variants:
            (value,) = v.settings.values()
            x = float(str(value).split()[0])
            record = {"key": f"k{x!r}", "status": "ok", "kinds": {"film": "solid", "slab": "solid", "gap": "gas"},
                      "outputs": self.formula(x)}
            self.records[record["key"]] = record
            out.append(record)
        return out

    def get(self, key):
        return self.records.get(key)


def _search(tmp_path, table):
    from fieldsection.study_search import search_from_mapping

    study = load_study(_folder(tmp_path, 'case = "coax.toml"\n'))
    return study, search_from_mapping(table, study)


def test_search_largest_value_meeting_at_least_on_the_worst_gas_region(tmp_path):
    from fieldsection.study_search import run_search

    # margin falls linearly with x in one gas region and stays high in the other: the largest x with
    # the worst margin >= 1.2 is where 3 - x = 1.2, x = 1.8
    study, search = _search(tmp_path, {"set": "geometry.parameters.r_outer", "from": 0.0, "to": 3.0,
                                       "tolerance": 1e-3, "output": "paschen_margin[every gas]", "at_least": 1.2,
                                       "find": "largest"})
    runner = _FormulaRunner(study, lambda x: {"paschen_margin[gap]": 3.0 - x, "paschen_margin[film]": 9.0})
    found = run_search(search, runner)
    assert found.met and found.value == pytest.approx(1.8, abs=1e-3)
    assert found.value <= 1.8 + 1e-12  # the answer is the bracket's meeting end


def test_search_refuses_a_singular_peak_unless_told_to_judge_it_on_the_mesh(tmp_path):
    from fieldsection.study_search import run_search

    def singular(x):
        return {"share_of_strength[film]": None, "peak_status[film]": "singular", "share_on_this_mesh[film]": 1.0 / x,
                "share_of_strength[slab]": 0.1, "peak_status[slab]": "converged"}

    table = {"set": "geometry.parameters.r_outer", "from": 1.0, "to": 4.0, "tolerance": 1e-3,
             "output": "share_of_strength[every solid]", "at_most": 0.5}
    study, search = _search(tmp_path, table)
    refused = run_search(search, _FormulaRunner(study, singular))
    assert not refused.met and "singular peak (sharp edge), cannot be judged" in refused.message
    study, search = _search(tmp_path, {**table, "singular": "this mesh"})
    judged = run_search(search, _FormulaRunner(study, singular))
    assert judged.value == pytest.approx(2.0, abs=1e-3)  # 1/x <= 0.5 from x = 2
    assert "mesh-dependent, not a peak field" in judged.message


def test_search_equal_by_brent(tmp_path):
    from fieldsection.study_search import run_search

    study, search = _search(tmp_path, {"set": "geometry.parameters.r_outer", "from": 1.5, "to": 10.0,
                                       "tolerance": 1e-6, "output": "peak_E[insulation]_kV_per_mm", "equal": 0.7})
    # the coaxial inner-surface field itself, V / (a ln(b/a)) with V = 1 kV, a = 1 mm (closed form, as above)
    found = run_search(search, _FormulaRunner(study, lambda b: {"peak_E[insulation]_kV_per_mm": 1 / math.log(b)}))
    assert found.value == pytest.approx(math.exp(1 / 0.7), abs=1e-5)
