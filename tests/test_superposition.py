"""The superposition check: V rebuilt from the free and bound charges by the 2D free-space Green's function.

Sources: superposition of the potentials of free and bound charge, sigma_b = P.n and rho_b = -div P, and
the 2D Green's function -ln|r - r'| / (2 pi eps0) per unit line charge (D. J. Griffiths, Introduction to
Electrodynamics, 4th ed., sections 2.3 and 4.2; J. D. Jackson, Classical Electrodynamics, 3rd ed.,
sections 1.10 (Green's representation formula: an insulated boundary acts as a double layer) and 4.3;
from memory). The dielectric rod in a uniform field has sigma_b = 2 eps0 (er - 1)/(er + 1) E0 cos(theta)
(Griffiths, Problem 4.22; tests/test_dielectric_cylinder.py checks the computed sigma_b against it).
The check must fall with the mesh (the asserted rates are below the measured ones, noted beside them),
and a sign error in the bound charge must show.
"""

import json

import numpy as np
import pytest
from scipy.constants import epsilon_0

from conftest import solve_script
from fieldsection import Material
from fieldsection.forked import helper_call, helpers_available
from fieldsection.superposition import SuperpositionCheck, check_superposition

ROD = {"rod": Material("rod", 4.0, None), "host": Material("vacuum", 1.0, None)}
PE = {"insulation": Material("pe", 2.3, None)}


def _rate(coarse: SuperpositionCheck, fine: SuperpositionCheck, ratio: float = 2.0) -> float:
    return float(np.log(coarse.largest_relative_difference / fine.largest_relative_difference) / np.log(ratio))


@pytest.fixture(scope="module")
def rods():
    return [solve_script("cylinder_in_field.geo", ROD, {"top": 1000.0, "bottom": 0.0}, outer="insulated",
                         parameters={"lc_rod": lc, "lc_far": 30 * lc}) for lc in (0.1, 0.05)]


def test_coax_check_converges():
    checks = [check_superposition(solve_script("coaxial.geo", PE, {"inner": 1000.0, "outer": 0.0},
                                               parameters={"lc": lc}).solution) for lc in (0.1, 0.05)]
    # measured: 4.1e-4 and 1.4e-4 (rate 1.6; 8.6e-4 at lc = 0.2, before the asymptotic range)
    assert checks[0].largest_relative_difference < 1e-3
    assert _rate(*checks) > 1.2
    # the free charge it used is the electrodes' reaction charge: equal and opposite, 2 pi eps C/m at 1 kV
    # over ln(b/a) (the coaxial capacitance; Griffiths Example 2.10, from memory)
    expected = 2 * np.pi * epsilon_0 * 2.3 * 1000.0 / np.log(3.0)
    assert checks[1].free_charge["inner"] == pytest.approx(expected, rel=1e-4)
    assert checks[1].free_charge["outer"] == pytest.approx(-expected, rel=1e-4)


def test_coax_linear_elements_converge_too():
    checks = [check_superposition(solve_script("coaxial.geo", PE, {"inner": 1000.0, "outer": 0.0}, order=1,
                                               curved=False, parameters={"lc": lc}).solution) for lc in (0.2, 0.1)]
    # measured: 3.4e-3 and 8.2e-4 (rate 2.0)
    assert _rate(*checks) > 1.5


def test_dielectric_rod_check_converges(rods):
    coarse, fine = (check_superposition(r.solution) for r in rods)
    # measured: 3.2e-6 and 6.8e-7 (rate 2.2; 1.0e-7 at the next halving, rate 2.7)
    assert coarse.largest_relative_difference < 2e-5
    assert _rate(coarse, fine) > 1.0
    assert set(coarse.region_differences) == {"rod", "host"}
    # the insulated side walls enter as a double layer; the line crosses the rod and the host
    assert len(coarse.line_points) > 50


def test_a_sign_error_in_the_bound_charge_is_caught(rods):
    right = check_superposition(rods[0].solution)
    wrong = check_superposition(rods[0].solution, bound_sign=-1.0)
    # the rod's bound charge, 2 eps0 (er - 1)/(er + 1) E0 cos(theta), with the wrong sign: about a percent of
    # the 1 kV span inside the rod (its dipole field doubles instead of cancelling)
    assert wrong.largest_relative_difference > 5e-3
    assert wrong.largest_relative_difference > 1000 * right.largest_relative_difference


def test_the_bound_charge_of_the_rod_alone_gives_its_closed_form_potential(rods):
    # The rod's own sigma_b = s cos(theta) on radius a gives, inside, V = -s r cos(theta) / (2 eps0) (a line
    # dipole layer; Griffiths Problem 4.22, from memory): the rebuilt potential's change inside the rod
    # equals the applied field's plus this depolarising part, i.e. E_inside = 2 E0 / (er + 1).
    check = check_superposition(rods[1].solution)
    inside = np.array([name == "rod" for name in check.probe_region])
    xy, v = check.probes[inside], check.rebuilt_potential[inside]
    design = np.column_stack([np.ones(len(xy)), xy])
    (_, gx, gy), *_ = np.linalg.lstsq(design, v, rcond=None)
    E0 = 1000.0 / 40e-3
    assert -gy == pytest.approx(-2 * E0 / (4.0 + 1.0), rel=2e-3)  # E points down (-y), from the top plate
    assert abs(gx) < 1e-3 * E0


def test_open_space_two_wires_are_checked():
    result = solve_script("two_wires.geo", {"air": Material("vacuum", 1.0, None)}, {"wire_a": 1.0, "wire_b": 0.0},
                          parameters={"space_radius": 8}, outer="open")
    check = check_superposition(result.solution)
    assert check.checked and "open space" in check.note
    assert check.largest_relative_difference < 2e-3  # measured 7.9e-5


def test_open_half_models_are_completed_by_mirror_images():
    from conftest import GEOMETRIES
    from fieldsection import Case, MeshSettings, ScriptGeometry, analyse
    from fieldsection.case import SINGLE_MESH

    medium = {"air": Material("test medium", 2.0, None)}  # eps_r 2: bound charge on the wires' faces too
    ground = check_superposition(solve_script("wire_over_ground.geo", medium, {"wire": 1.0, "ground": 0.0},
                                              outer="open").solution)
    assert ground.checked and "ground plane (opposite sign)" in ground.note
    assert ground.largest_relative_difference < 2e-3  # measured 7.4e-4
    half = Case("half", ScriptGeometry(GEOMETRIES / "two_wires_half.geo", {}, 1e-3), medium,
                {"wire_a": 1.0, "wire_b": 0.0}, outer_boundary="open", insulated_curves=frozenset({"symmetry"}),
                symmetry_copies=2, mesh=MeshSettings(element_order=2), refinement=SINGLE_MESH)
    check = check_superposition(analyse(half).solution)
    assert check.checked and "symmetry line (same sign)" in check.note
    assert check.largest_relative_difference < 2e-3  # measured 4.8e-4; the full model 5.6e-4


def test_axisymmetric_model_is_refused_with_a_note(tmp_path):
    from test_axisymmetric import sphere_case
    from fieldsection import analyse

    result = analyse(sphere_case(parameters={"shell": 1}, electrodes={"sphere": 1000.0, "shell": 0.0}))
    check = check_superposition(result.solution)
    assert not check.checked and check.largest_relative_difference is None
    assert "axisymmetric" in check.note
    from fieldsection.report import write_report

    folder = write_report(result, tmp_path, with_figures=False)
    data = json.loads((folder / "results.json").read_text())["charge_superposition_check"]
    assert data["checked"] is False and data["largest_relative_difference"] is None
    assert "Superposition check not checked: an axisymmetric model" in (folder / "report.html").read_text()


def test_report_carries_the_number_and_the_figure(tmp_path):
    from fieldsection.report import write_report

    result = solve_script("coaxial.geo", {"insulation": Material("pe", 2.3, 20e6)}, {"inner": 1000.0, "outer": 0.0},
                          parameters={"lc": 0.3})
    folder = write_report(result, tmp_path)
    data = json.loads((folder / "results.json").read_text())["charge_superposition_check"]
    assert data["checked"] and 0 < data["largest_relative_difference"] < 1e-2
    assert (folder / "superposition.png").stat().st_size > 10_000
    html = (folder / "report.html").read_text()
    assert "rebuilt at" in html and "superposition.png" in html


def test_the_multipole_sum_equals_the_direct_sum():
    # the fast sum against the plain double loop, for line charges and dipoles clustered and spread, with the
    # probes among them: the 2D potentials -q ln|z - w| / (2 pi eps0) and Re(m / (w - z)) / (2 pi eps0)
    # (Griffiths 2013, Problem 2.47 for the line charge; from memory)
    from fieldsection.multipole import LogPotentialSum

    rng = np.random.default_rng(3)
    w = np.concatenate([rng.normal(0.0, 1e-3, 4000), rng.uniform(-1e-2, 1e-2, 4000)]) \
        + 1j * np.concatenate([rng.normal(0.0, 1e-3, 4000), rng.uniform(-1e-2, 1e-2, 4000)])
    q = rng.normal(0.0, 1e-9, w.size)
    m = (rng.normal(0.0, 1e-12, w.size) + 1j * rng.normal(0.0, 1e-12, w.size)) * (np.arange(w.size) % 3 == 0)
    probes = np.column_stack([rng.uniform(-9e-3, 9e-3, 300), rng.uniform(-9e-3, 9e-3, 300)])
    where = np.vstack([w.real, w.imag])
    fast = LogPotentialSum(probes, where.min(axis=1), where.max(axis=1), where, 1.0)
    assert fast.depth > 2  # the test exercises several levels
    fast.add(w[:5000], q[:5000], m[:5000])
    fast.add(w[5000:], q[5000:])  # charges only
    fast.add(w[5000:], None, m[5000:])  # dipoles only
    z = probes[:, 0] + 1j * probes[:, 1]
    d = w[None, :] - z[:, None]
    direct = ((-q * np.log(np.abs(d))).sum(axis=1) + (m / d).real.sum(axis=1)) / (2 * np.pi * epsilon_0)
    # measured 3e-10 (order 20); an order-6 expansion gives 6e-5 and fails
    assert np.abs(fast.potential() - direct).max() < 1e-8 * np.abs(direct).max()
    # the same sources summed in two parts (as a helper process does with half of them) and added together
    first = LogPotentialSum(probes, where.min(axis=1), where.max(axis=1), where, 1.0)
    first.add(w[:5000], q[:5000], m[:5000])
    second = first.empty()
    assert second.count == 0 and second.depth == first.depth and not second.moments.any()
    second.add(w[5000:], q[5000:], m[5000:])
    assert first.count + second.count == w.size
    assert np.abs(first.potential() + second.potential() - direct).max() < 1e-8 * np.abs(direct).max()


def test_a_helper_process_sums_half_the_sources_to_the_same_number(rods, monkeypatch):
    """Half of the sources summed in a forked helper process and added in (as on a large mesh) must give the
    check of one process to round-off; a helper that fails leaves its half to this process, with the same
    result."""
    import fieldsection.superposition as superposition

    alone = check_superposition(rods[1].solution, helper=False)
    monkeypatch.setattr(superposition, "HELPER_ABOVE", 0)  # the small model takes a helper too
    started = []
    monkeypatch.setattr(superposition, "helper_call", lambda *a: started.append(1) or helper_call(*a))
    shared = check_superposition(rods[1].solution)
    assert started == ([1] if helpers_available() else [])

    class Failed:
        def result(self):
            return None

    monkeypatch.setattr(superposition, "helper_call", lambda *a: Failed())
    without = check_superposition(rods[1].solution)
    for check in (shared, without):
        assert check.sources >= alone.sources  # (the two sides of a facet split between the halves: two sources)
        np.testing.assert_allclose(check.rebuilt_potential, alone.rebuilt_potential, rtol=0,
                                   atol=1e-9 * alone.potential_span)
        assert check.largest_relative_difference == pytest.approx(alone.largest_relative_difference, rel=1e-6)
