"""Floating conductors: a metal shell between the conductors of a coaxial line.

Source: Gauss's law for nested coaxial cylinders (e.g. Kuffel, Zaengl & Kuffel, High Voltage
Engineering, 2nd ed., 2000, ch. 4 on concentric cylinders and grading; from memory). An uncharged
shell of radii r1 < r2 splits the line into two coaxial capacitors in series,
C1 = 2 pi eps / ln(r1/a), C2 = 2 pi eps / ln(b/r2), so C = C1 C2 / (C1 + C2), and the shell sits at
V C1 / (C1 + C2); with a net charge q per metre it sits at (C1 V + q) / (C1 + C2). As the shell gets
thin it lies on an equipotential of the plain line and leaves C = 2 pi eps / ln(b/a) unchanged.
"""

import textwrap

import numpy as np
import pytest
from scipy.constants import epsilon_0

from conftest import GEOMETRIES
from fieldsection import Case, Material, MeshSettings, ScriptGeometry, analyse, load_case
from fieldsection.case import SINGLE_MESH

A, R1, R2, B, ER, V = 1e-3, 1.8e-3, 1.9e-3, 3e-3, 2.25, 1000.0
C1 = 2 * np.pi * epsilon_0 * ER / np.log(R1 / A)
C2 = 2 * np.pi * epsilon_0 * ER / np.log(B / R2)


def shell_case(charge=0.0, r_in=1.8, r_out=1.9):
    dielectric = Material("test dielectric", ER, None)
    return Case("shell", ScriptGeometry(GEOMETRIES / "coaxial_floating_shell.geo",
                                        {"r_shell_in": r_in, "r_shell_out": r_out}, 1e-3),
                {"inner_gap": dielectric, "outer_gap": dielectric}, {"inner": V, "outer": 0.0},
                floating={"shell": charge}, mesh=MeshSettings(element_order=2), refinement=SINGLE_MESH)


def test_uncharged_shell_gives_series_capacitance_and_its_potential():
    result = analyse(shell_case())
    cap = result.capacitance
    assert cap.names == ("inner", "outer")  # the floating shell is not a row of the matrix
    assert cap.two_level.from_energy == pytest.approx(C1 * C2 / (C1 + C2), rel=1e-4)
    (shell_potential,) = result.solution.floating_potentials
    assert shell_potential == pytest.approx(V * C1 / (C1 + C2), rel=1e-4)
    shell = next(c for c in result.charges.conductors if c.name == "shell")
    assert abs(shell.charge_from_flux) < 1e-3 * C1 * V  # net zero: +q inside face, -q outside face


def test_charged_shell_shifts_its_potential():
    q = 2e-9  # C/m
    result = analyse(shell_case(charge=q))
    (shell_potential,) = result.solution.floating_potentials
    assert shell_potential == pytest.approx((C1 * V + q) / (C1 + C2), rel=1e-4)
    index = [c.name for c in result.problem.conductors].index("shell")
    assert result.capacitance.charges_from_reaction[index] == pytest.approx(q, rel=1e-9)
    assert np.isnan(result.capacitance.two_level.from_flux)  # a charged shell: the flux no longer measures C


def test_thin_shell_on_an_equipotential_leaves_the_line_unchanged():
    result = analyse(shell_case(r_in=1.8, r_out=1.805))
    c_line = 2 * np.pi * epsilon_0 * ER / np.log(B / A)
    assert result.capacitance.two_level.from_energy == pytest.approx(c_line, rel=2e-3)
    (shell_potential,) = result.solution.floating_potentials
    plain = V * np.log(B / 1.8025e-3) / np.log(B / A)  # the plain line's potential at the shell's mid radius
    assert shell_potential == pytest.approx(plain, rel=2e-3)


def test_floating_electrode_in_a_case_file(tmp_path):
    case = tmp_path / "shell.toml"
    case.write_text(textwrap.dedent(f"""
        [geometry]
        script = "{GEOMETRIES / 'coaxial_floating_shell.geo'}"
        length_unit = "mm"
        [regions]
        inner_gap = "PTFE"
        outer_gap = "PTFE"
        [electrodes]
        inner = "1 kV"
        outer = "0 V"
        shell = {{ floating = true, charge = "2 nC/m" }}
    """))
    loaded = load_case(case)
    assert loaded.floating == {"shell": pytest.approx(2e-9)}
    assert set(loaded.electrodes) == {"inner", "outer"}


def test_only_floating_electrodes_is_refused():
    from fieldsection import FieldSectionError

    with pytest.raises(FieldSectionError, match="no electrode with a potential .only floating ones"):
        Case("x", ScriptGeometry(GEOMETRIES / "coaxial.geo"), {"insulation": Material("m", 2.0, None)}, {},
             floating={"inner": 0.0, "outer": 0.0}, refinement=SINGLE_MESH)
