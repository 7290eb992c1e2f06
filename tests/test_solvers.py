"""Every linear solver gives the same physics; bad solver choices are refused clearly.

Sources: coaxial line C = 2 pi eps0 eps_r / ln(b/a) (Gauss's law; D. M. Pozar, Microwave
Engineering, 4th ed., Wiley 2012, Table 2.1, from memory); a floating shell between coaxial
conductors: two coaxial capacitors in series, shell at V C1 / (C1 + C2) (Kuffel, Zaengl & Kuffel,
High Voltage Engineering, 2nd ed., 2000, ch. 4, from memory).
"""

from __future__ import annotations

import sys
from dataclasses import replace

import numpy as np
import pytest
from scipy.constants import epsilon_0

import fieldsection.solve as solve_module
from conftest import GEOMETRIES
from fieldsection import Case, Material, MeshSettings, ScriptGeometry, analyse
from fieldsection.errors import CaseFileError, SolverError
from fieldsection.solve import solver_chain
from fieldsection.case import SINGLE_MESH
from test_bad_input import PLATES_CASE, write_case

A, B, EPS_R, V = 1e-3, 3e-3, 2.25, 1000.0
C_COAX = 2 * np.pi * epsilon_0 * EPS_R / np.log(B / A)  # Pozar, Table 2.1
R1, R2 = 1.8e-3, 1.9e-3
C1 = 2 * np.pi * epsilon_0 * EPS_R / np.log(R1 / A)  # Kuffel et al., ch. 4: inner capacitor
C2 = 2 * np.pi * epsilon_0 * EPS_R / np.log(B / R2)  # outer capacitor, in series with C1


def coax(method: str) -> Case:
    return Case("coaxial", ScriptGeometry(GEOMETRIES / "coaxial.geo", {"lc": 0.2}, 1e-3),
                {"insulation": Material("test dielectric", EPS_R, 20e6)}, {"inner": V, "outer": 0.0},
                mesh=MeshSettings(element_order=2), solver=method, refinement=SINGLE_MESH)


def shell(method: str) -> Case:
    dielectric = Material("test dielectric", EPS_R, None)
    return Case("shell", ScriptGeometry(GEOMETRIES / "coaxial_floating_shell.geo",
                                        {"r_shell_in": 1.8, "r_shell_out": 1.9}, 1e-3),
                {"inner_gap": dielectric, "outer_gap": dielectric}, {"inner": V, "outer": 0.0},
                floating={"shell": 0.0}, mesh=MeshSettings(element_order=2), solver=method, refinement=SINGLE_MESH)


@pytest.mark.parametrize("method", ["auto", "direct", "iterative"])
def test_each_method_gives_the_coaxial_capacitance(method):
    result = analyse(coax(method))
    assert result.capacitance.two_level.from_energy == pytest.approx(C_COAX, rel=1e-4)
    assert result.solution.solver in ("SuperLU", "PARDISO", "AMG-CG")


def test_iterative_and_direct_agree_with_a_floating_conductor():
    direct, iterative = analyse(shell("direct")), analyse(shell("iterative"))
    assert iterative.solution.solver == "AMG-CG"
    series = C1 * C2 / (C1 + C2)
    for result in (direct, iterative):
        assert result.capacitance.two_level.from_energy == pytest.approx(series, rel=1e-3)
        assert result.solution.floating_potentials[0] == pytest.approx(V * C1 / (C1 + C2), rel=1e-3)
    # the same discrete problem: the solvers agree far below the discretisation error
    assert np.allclose(iterative.solution.potential, direct.solution.potential, rtol=0, atol=1e-6 * V)


def test_optional_direct_solver_missing_falls_back_to_superlu(monkeypatch):
    monkeypatch.setitem(sys.modules, "pypardiso", None)  # importing it now raises ImportError
    result = analyse(coax("direct"))
    assert result.solution.solver == "SuperLU"
    assert result.capacitance.two_level.from_energy == pytest.approx(C_COAX, rel=1e-4)


def test_iterative_without_pyamg_is_a_clear_error(monkeypatch):
    monkeypatch.setitem(sys.modules, "pyamg", None)
    with pytest.raises(SolverError, match=r"no linear solver available for solver\.method = 'iterative'"):
        analyse(coax("iterative"))


def test_cg_that_does_not_converge_raises(monkeypatch):
    monkeypatch.setattr(solve_module, "CG_MAX_ITERATIONS", 1)
    with pytest.raises(SolverError, match="did not converge: relative residual"):
        analyse(coax("iterative"))


def test_auto_chooses_by_size():
    assert solver_chain("auto", 3_000) == ("SuperLU",)
    assert solver_chain("auto", 10_000)[0] == "PARDISO"
    assert solver_chain("auto", 100_000)[0] == "PARDISO"
    assert solver_chain("auto", 2_000_000)[:2] == ("PARDISO", "AMG-CG")


def test_bad_method_in_python():
    with pytest.raises(CaseFileError, match=r"solver\.method = 'fast': use one of 'auto', 'direct', 'iterative'"):
        replace(coax("auto"), solver="fast")




def test_solver_flag_overrides_the_case(tmp_path, capsys):
    from fieldsection.cli import EXIT_OK, main

    case = write_case(tmp_path, PLATES_CASE + '\n[solver]\nmethod = "direct"\n')
    code = main(["run", str(case), "--reports", str(tmp_path / "r"), "--no-figures", "--quiet", "--profile",
                 "--solver", "iterative"])
    assert code == EXIT_OK
    assert "linear solver AMG-CG" in capsys.readouterr().out


def test_bad_solver_flag_exits_with_usage(tmp_path, capsys):
    from fieldsection.cli import main

    with pytest.raises(SystemExit) as stop:
        main(["run", str(write_case(tmp_path)), "--solver", "fast"])
    assert stop.value.code == 2
    assert "invalid choice: 'fast'" in capsys.readouterr().err
