"""The analysis and the report run on one OpenBLAS thread (``fieldsection/blas_threads.py``): its idle worker
threads otherwise busy-wait on the second core that PARDISO, the helper processes and other jobs need."""

import pytest
from threadpoolctl import threadpool_info

from conftest import solve_script
from fieldsection import Material
from fieldsection.blas_threads import one_blas_thread


def _openblas_threads() -> list[int]:
    return [pool["num_threads"] for pool in threadpool_info() if pool["internal_api"] == "openblas"]


@pytest.fixture
def several_threads():
    before = _openblas_threads()
    if not before or max(before) < 2:
        pytest.skip("OpenBLAS runs one thread here already (one core, or limited by the environment): nothing to limit")
    return before


def test_the_limit_holds_inside_and_is_lifted_after(several_threads):
    with one_blas_thread():
        assert set(_openblas_threads()) == {1}
    assert _openblas_threads() == several_threads


def test_the_analysis_and_the_report_compute_on_one_openblas_thread(several_threads, monkeypatch, tmp_path):
    import fieldsection.pipeline as pipeline
    import fieldsection.report as report

    seen = []
    fields, check = pipeline.element_fields, report.check_superposition
    monkeypatch.setattr(pipeline, "element_fields", lambda *a, **k: seen.append(_openblas_threads()) or fields(*a, **k))
    monkeypatch.setattr(report, "check_superposition",
                        lambda *a, **k: seen.append(_openblas_threads()) or check(*a, **k))
    result = solve_script("coaxial.geo", {"insulation": Material("pe", 2.3, None)}, {"inner": 1.0, "outer": 0.0},
                          parameters={"lc": 1.0})
    report.write_report(result, tmp_path / "reports", with_figures=False)
    assert len(seen) == 2 and all(set(threads) == {1} for threads in seen)
    assert _openblas_threads() == several_threads
