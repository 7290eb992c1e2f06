"""A study's report: the table (CSV and JSON), plots against the axes, and an HTML index.

``reports/<study>/`` is built under a temporary name beside its destination and renamed into
place only when complete. It holds ``table.csv``, ``table.json``, ``search.json`` (with a
search), ``plots/*.png``, ``index.html`` linking every variant's own report under ``variants/``,
and ``run.log`` (the cache's log of which variants ran and which were read back).
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
import shutil
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, Sequence

from . import __version__
from .errors import ReportError
from .results import CAUTIONS
from .study import Study, Variant, input_columns, split_quantity

STUDY_CAUTION = ("Each variant is an independent run with its own mesh: compare variants with their certificates "
                 "(converged, singular, not converged) in view; a search assumes the criterion changes "
                 "monotonically (or has one minimum) over the range it was given.")


@dataclass
class StudyTable:
    """The study's rows as plain records (no pandas needed): one dict per variant, units in the column names."""

    columns: list[str]
    rows: list[dict[str, Any]]
    #: input columns per axis: axis label -> [(column, unit)] (unit "" for a plain number, "text" for words)
    axes: dict[str, list[tuple[str, str]]] = field(default_factory=dict)
    facts: dict[str, dict[str, Any]] = field(default_factory=dict)  # variant -> region kinds, strengths, fraction

    def column(self, name: str) -> list[Any]:
        if name not in self.columns:
            raise KeyError(f"no column {name!r}; columns: {', '.join(self.columns)}")
        return [row.get(name) for row in self.rows]

    def to_csv(self) -> str:
        out = io.StringIO()
        writer = csv.DictWriter(out, fieldnames=self.columns, extrasaction="ignore", lineterminator="\n")
        writer.writeheader()
        for row in self.rows:
            writer.writerow({k: "" if row.get(k) is None else row.get(k) for k in self.columns})
        return out.getvalue()

    def to_dataframe(self):
        """A pandas DataFrame of the rows (needs pandas, which fieldsection does not install)."""
        import pandas

        return pandas.DataFrame(self.rows, columns=self.columns)

    def summary(self) -> dict[str, int]:
        failed = sum(1 for r in self.rows if r.get("status") != "ok")
        return {"variants": len(self.rows), "succeeded": len(self.rows) - failed, "failed": failed}


def _input_number(value: Any) -> Any:
    parsed = split_quantity(value)
    return parsed[0] if parsed is not None else value


def build_table(study: Study, variants: Sequence[Variant], records: Sequence[Mapping[str, Any]]) -> StudyTable:
    """One row per variant: its inputs (numbers in the column's unit), status, error and headline outputs."""
    axes: dict[str, list[tuple[str, str]]] = {}
    names: dict[str, tuple[str, str]] = {}
    for axis in study.axes:
        columns = input_columns(axis.keys, axis.values)
        names.update(columns)
        axes[axis.label] = [columns[k] for k in axis.keys]
    columns = ["variant"] + [c for c, _ in names.values()] + ["status", "error", "error_type"]
    rows, facts = [], {}
    for variant, record in zip(variants, records):
        row: dict[str, Any] = {"variant": variant.name}
        for key, value in variant.settings.items():
            column, unit = names.get(key, (key, "text"))
            row[column] = value if unit == "text" else _input_number(value)
        row["status"] = record["status"]
        row["error"] = record.get("error")
        row["error_type"] = record.get("error_type")
        for name, value in record.get("outputs", {}).items():
            row[name] = value
            if name not in columns:
                columns.append(name)
        row["input_key"] = record["key"]
        rows.append(row)
        facts[variant.name] = {k: record.get(k) for k in ("kinds", "strengths_kV_per_mm", "hotspot_fraction")}
    for tail in ("seconds", "input_key"):
        if tail in columns:
            columns.remove(tail)
        columns.append(tail)
    return StudyTable(columns, rows, axes, facts)


def _safe(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", text).strip("_")


def default_plot_outputs(table: StudyTable) -> list[str]:
    """Share of strength per region (with the limit drawn) and the capacitance between the two levels."""
    wanted = [c for c in table.columns if c.startswith("share_of_strength[") or c.startswith("share_on_this_mesh[")]
    wanted += [c for c in table.columns if c.startswith("C_between_levels")]
    wanted += [c for c in table.columns if c.startswith("paschen_margin[")]
    return wanted


def _limit(column: str, table: StudyTable, search: Any) -> list[tuple[float, str]]:
    """Lines worth drawing on a plot of ``column``: the allowed share, the strength, a margin of 1, a search's threshold."""
    lines = []
    fractions = {f.get("hotspot_fraction") for f in table.facts.values() if f.get("hotspot_fraction")}
    if column.startswith(("share_of_strength[", "share_on_this_mesh[", "worst_hotspot_share")):
        lines.append((1.0, "dielectric strength"))
        if len(fractions) == 1:
            lines.append((fractions.pop(), "hotspot fraction (allowed share)"))
    elif column.startswith("paschen_margin["):
        lines.append((1.0, "inception (margin 1)"))
    elif column.startswith("peak_E[") and column.endswith("_kV_per_mm"):
        region = column[len("peak_E["):column.index("]")]
        strengths = {(f.get("strengths_kV_per_mm") or {}).get(region) for f in table.facts.values()} - {None}
        if len(strengths) == 1:
            lines.append((strengths.pop(), f"dielectric strength of {region}"))
    if search is not None and getattr(search, "output", None) == column and search.threshold is not None:
        lines.append((search.threshold, f"search: {search.criterion}"))
    return lines


def draw_plots(table: StudyTable, outputs: Sequence[str], folder: Path, search: Any = None) -> list[dict[str, str]]:
    """One PNG per (output, numeric axis): a line per value of the next axis, the other axes at their first value."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    folder.mkdir(parents=True, exist_ok=True)
    made = []
    ok_rows = [r for r in table.rows if r.get("status") == "ok"]
    labels = list(table.axes)
    for output in outputs:
        if output not in table.columns:
            continue
        for a, label in enumerate(labels):
            x_column, x_unit = table.axes[label][0]
            if x_unit == "text":
                continue
            others = [table.axes[l][0][0] for l in labels if l != label]
            group_column = others[0] if others else None
            fixed = {c: table.rows[0].get(c) for c in others[1:]}  # further axes held at their first value
            groups: dict[Any, list[tuple[float, float]]] = {}
            for row in ok_rows:
                if any(row.get(c) != v for c, v in fixed.items()):
                    continue
                y = row.get(output)
                if not isinstance(y, (int, float)) or isinstance(y, bool) or not math.isfinite(y):
                    continue
                groups.setdefault(row.get(group_column) if group_column else None, []).append((row[x_column], y))
            if not groups:
                continue
            fig, ax = plt.subplots(figsize=(6.4, 4.2))
            for value, points in groups.items():
                points.sort()
                name = None if group_column is None else f"{group_column} = {value}"
                ax.plot([p[0] for p in points], [p[1] for p in points], "o-", label=name)
            styles = [("darkred", "-"), ("tab:orange", "--"), ("tab:purple", ":")]
            for (y, what), (colour, line) in zip(_limit(output, table, search), styles):
                ax.axhline(y, color=colour, linestyle=line, linewidth=1.3, label=f"{what}: {y:.4g}")
            ax.set_xlabel(x_column)
            ax.set_ylabel(output)
            title = []
            if "_on_this_mesh[" in output:
                title.append("a singular peak's value on the last mesh: mesh-dependent, not a peak field")
            if fixed:
                title.append("at " + ", ".join(f"{c} = {v}" for c, v in fixed.items()))
            if title:
                ax.set_title("\n".join(title), fontsize=9)
            ax.grid(True, alpha=0.3)
            if ax.get_legend_handles_labels()[1]:
                ax.legend(fontsize=8)
            name = f"{_safe(output)}--{_safe(label)}.png"
            fig.tight_layout()
            fig.savefig(folder / name, dpi=110)
            plt.close(fig)
            made.append({"file": f"plots/{name}", "caption": f"{output} against {x_column}"})
    return made


def _render(study: Study, table: StudyTable, search: Any, plots: list[dict[str, str]], links: dict[str, str],
            search_links: dict[str, str], log_tail: str) -> str:
    from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape

    env = Environment(loader=PackageLoader("fieldsection", "templates"), autoescape=select_autoescape(["html", "j2"]),
                      undefined=StrictUndefined)
    shown = [c for c in table.columns if c not in ("input_key", "error_type")]
    return env.get_template("study.html.j2").render(
        study=study, table=table, shown=shown, summary=table.summary(), plots=plots, links=links,
        search=search, search_links=search_links, cautions=[STUDY_CAUTION, *CAUTIONS], version=__version__,
        log_tail=log_tail, fmt=_fmt)


def _fmt(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return f"{value:.6g}"
    return str(value)


def _json_default(value):
    if hasattr(value, "tolist"):
        return value.tolist()
    raise TypeError(f"cannot store {type(value).__name__} in a study table")


def write_study_report(study: Study, table: StudyTable, search: Any, reports_dir: Path, runner: Any) -> Path:
    """Write ``reports_dir/<study>/`` atomically (built beside it, renamed into place) and return its path."""
    from .report import built_whole
    from .study_run import LOG_FILE

    try:
        reports_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ReportError(f"cannot create the reports folder {str(reports_dir)!r}: {exc.strerror}") from None
    target = reports_dir / study.name
    with built_whole(reports_dir, study.name, "the study report") as staging:
        links, search_links = {}, {}
        for row in table.rows:
            source = runner.cache.report(row["input_key"])
            if source is not None:
                shutil.copytree(source, staging / "variants" / row["variant"])
                links[row["variant"]] = f"variants/{row['variant']}/report.html"
        if search is not None:
            for step in search.steps:
                source = runner.cache.report(step.key)
                if source is not None and not (staging / "search" / step.name).exists():
                    shutil.copytree(source, staging / "search" / step.name)
                    search_links[step.name] = f"search/{step.name}/report.html"
            (staging / "search.json").write_text(json.dumps(search.as_dict(), indent=2, default=_json_default),
                                                 encoding="utf-8")
        (staging / "table.csv").write_text(table.to_csv(), encoding="utf-8")
        payload = {
            "fieldsection_version": __version__,
            "study": study.name,
            "title": study.title,
            "base_case": str(study.base_file) if study.base_file else None,
            "axes": {label: [{"column": c, "unit": u} for c, u in cols] for label, cols in table.axes.items()},
            "summary": table.summary(),
            "columns": table.columns,
            "rows": table.rows,
            "cautions": [STUDY_CAUTION, *CAUTIONS],
        }
        (staging / "table.json").write_text(json.dumps(payload, indent=1, default=_json_default), encoding="utf-8")
        outputs = list(study.plot_outputs) or default_plot_outputs(table)
        if search is not None and search.output in table.columns and search.output not in outputs:
            outputs.append(search.output)
        plots = draw_plots(table, outputs, staging / "plots", search)
        log_path = runner.cache.folder / LOG_FILE
        log_text = log_path.read_text(encoding="utf-8") if log_path.is_file() else ""
        (staging / "run.log").write_text(log_text, encoding="utf-8")
        tail = "\n".join(log_text.splitlines()[-40:])
        (staging / "index.html").write_text(_render(study, table, search, plots, links, search_links, tail),
                                            encoding="utf-8")
    return target
