"""One OpenBLAS thread while fieldsection computes (``one_blas_thread``, a context manager and decorator).

numpy's and scipy's OpenBLAS keep a worker thread per core that busy-waits (``sched_yield``) for a while after
every call. Our BLAS calls are vector-sized (the recovery's conjugate gradients, small products in the
superposition check), where a second thread gains nothing; but the waiting thread held the second core through
most of a run: measured on the demo, 100 % of a core during the refinement, the recovery and the charges, and
during the report it competed with the superposition check's helper process. PARDISO's MKL threads and OpenMP
pools are left as they are (the factorisation does use both cores). The previous limits come back on exit. The
limit is process-wide: analyses running at once in threads of one process share it, and the last to end restores
what it found when it began, possibly the one-thread limit of another.
"""

from __future__ import annotations

from contextlib import contextmanager
from typing import Iterator

from threadpoolctl import ThreadpoolController


@contextmanager
def one_blas_thread() -> Iterator[None]:
    """Limit every OpenBLAS loaded in this process to one thread until the block (or decorated call) ends."""
    with ThreadpoolController().select(internal_api="openblas").limit(limits=1):
        yield
