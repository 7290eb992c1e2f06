"""Benchmark of the accuracy path: DOFs and time to bring a coaxial line's capacitance within a tolerance.

Run on demand (never in the test suite):

    python benchmarks/adaptive.py

Compares, in one run, the adaptive loop (P2 and P3 on curved elements, starting from the script's
coarse mesh) with uniform refinement of P1 elements (the mesh size halved until the tolerance is
met), on curved and on straight elements. Exact value: C = 2 pi eps0 eps_r / ln(b/a) (Gauss's law). Only the ratios count:
the machine is shared and noisy. Results are printed and written to benchmarks/results/adaptive-<date-time>.json.
"""

from __future__ import annotations

import json
import math
import sys
import time
from datetime import datetime, timezone
from pathlib import Path

from scipy.constants import epsilon_0

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from fieldsection import Case, Material, MeshSettings, ScriptGeometry, analyse  # noqa: E402
from fieldsection.case import SINGLE_MESH, Refinement  # noqa: E402

SCRIPT = HERE.parent / "geometries" / "coaxial.geo"
A, B, ER = 1e-3, 3e-3, 2.25
EXACT = 2 * math.pi * epsilon_0 * ER / math.log(B / A)
TOLERANCES = (1e-4, 1e-6)


def _case(order: int, curved: bool, lc_mm: float, refinement: Refinement) -> Case:
    return Case("coax", ScriptGeometry(SCRIPT, {"lc": lc_mm}, 1e-3), {"insulation": Material("bench", ER, None)},
                {"inner": 1.0, "outer": 0.0}, mesh=MeshSettings(element_order=order, curved=curved),
                refinement=refinement)


def adaptive(order: int, tolerance: float) -> dict:
    start = time.perf_counter()
    result = analyse(_case(order, True, 1.0, Refinement(capacitance_tolerance=tolerance / 10, field_tolerance=1e-3,
                                                      max_dofs=400_000, max_passes=12)))
    total = time.perf_counter() - start
    elapsed = 0.0
    for k, record in enumerate(result.passes):
        elapsed += record.seconds
        error = abs(record.capacitance[0, 0] / EXACT - 1)
        if error <= tolerance:
            return {"method": f"adaptive P{order}", "tolerance": tolerance, "reached": True, "passes": k + 1,
                    "dofs": int(record.ndofs), "error": error, "seconds": elapsed, "run_seconds": total}
    return {"method": f"adaptive P{order}", "tolerance": tolerance, "reached": False,
            "dofs": int(result.passes[-1].ndofs), "error": error, "seconds": total}


def uniform_p1(tolerance: float, curved: bool) -> dict:
    """Halve the mesh size until the error is below ``tolerance`` on two levels in a row (on straight
    elements the polygon's geometric error and the discretisation error have opposite signs, so one
    level can land near zero by cancellation)."""
    method = f"uniform P1 ({'curved' if curved else 'straight'})"
    lc, elapsed, below = 0.4, 0.0, []
    while lc > 0.002:
        start = time.perf_counter()
        result = analyse(_case(1, curved, lc, SINGLE_MESH))
        elapsed += time.perf_counter() - start
        error = abs(result.capacitance.maxwell_from_charge[0, 0] / EXACT - 1)
        below = below + [(lc, int(result.problem.ndofs), error, elapsed)] if error <= tolerance else []
        if len(below) == 2:
            lc, dofs, error, seconds = below[0]
            return {"method": method, "tolerance": tolerance, "reached": True, "lc_mm": lc, "dofs": dofs,
                    "error": error, "seconds": seconds}
        lc /= 2
    return {"method": method, "tolerance": tolerance, "reached": False, "lc_mm": lc * 2,
            "dofs": int(result.problem.ndofs), "error": error, "seconds": elapsed}


def main() -> None:
    rows = []
    for tolerance in TOLERANCES:
        for order in (2, 3):
            rows.append(adaptive(order, tolerance))
        if tolerance >= 1e-4:  # uniform P1 to 1e-6 would need millions of DOFs
            rows.append(uniform_p1(tolerance, curved=True))
            rows.append(uniform_p1(tolerance, curved=False))
    print(f"{'method':24s} {'tolerance':>9s} {'reached':>7s} {'DOFs':>9s} {'error':>9s} {'seconds':>8s}")
    for row in rows:
        print(f"{row['method']:24s} {row['tolerance']:9.0e} {str(row['reached']):>7s} {row['dofs']:9d} "
              f"{row['error']:9.1e} {row['seconds']:8.2f}")
    uniform = next(r for r in rows if r["method"] == "uniform P1 (curved)" and r["tolerance"] == 1e-4)
    best = min((r for r in rows if r["method"].startswith("adaptive") and r["tolerance"] == 1e-4 and r["reached"]),
               key=lambda r: r["dofs"])
    ratio = uniform["dofs"] / best["dofs"]
    print(f"DOFs to 1e-4: uniform P1 / best adaptive ({best['method']}) = {ratio:.1f} (target >= 10)")
    out = HERE / "results" / f"adaptive-{datetime.now(timezone.utc):%Y%m%dT%H%M%SZ}.json"
    out.parent.mkdir(exist_ok=True)
    out.write_text(json.dumps({"exact_pF_per_m": EXACT * 1e12, "rows": rows, "dof_ratio_at_1e-4": ratio}, indent=2))
    print(f"written {out}")


if __name__ == "__main__":
    main()
