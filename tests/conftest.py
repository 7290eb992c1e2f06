"""Shared helpers: build a case from a shipped geometry script and analyse it."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from fieldsection import Case, Material, MeshSettings, ScriptGeometry, analyse
from fieldsection.case import SINGLE_MESH, Refinement

GEOMETRIES = Path(__file__).resolve().parent.parent / "geometries"


def solve_script(script: str, regions: dict[str, Material], electrodes: dict[str, float], *,
                 parameters: dict[str, float] | None = None, order: int = 2, curved: bool = True,
                 outer: str = "grounded", fraction: float = 0.5, refinement: Refinement = SINGLE_MESH):
    """Analyse a geometry from ``geometries/`` whose lengths are in mm (one mesh unless ``refinement`` says)."""
    case = Case(
        name=Path(script).stem,
        geometry=ScriptGeometry(GEOMETRIES / script, parameters or {}, 1e-3),
        regions=regions,
        electrodes=electrodes,
        outer_boundary=outer,
        hotspot_fraction=fraction,
        mesh=MeshSettings(element_order=order, curved=curved), refinement=refinement
    )
    return analyse(case)


@pytest.fixture
def geometries() -> Path:
    return GEOMETRIES


def run_fresh_python(*lines: str) -> str:
    """Run ``lines`` as a script in a fresh interpreter (nothing imported yet); its standard output, after
    asserting that it succeeded."""
    out = subprocess.run([sys.executable, "-c", "\n".join(lines)], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    return out.stdout
