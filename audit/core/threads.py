"""BLAS threading policy.

lti-audit works on many small and medium matrices. For those, multi-threaded BLAS
only adds synchronisation, and on a loaded machine OpenBLAS's spinning threads can
make an audit 10-50x slower (measured: a 100-state SISO audit took 1.4 s
single-threaded and 70 s with default threads while another process used a core).
So audits run with ONE BLAS thread, except inside :func:`wide_blas_threads`, which
wraps the few dense O(n^3) factorizations of large models (Hamiltonian eigenvalue
tests, Schur forms) where several threads pay off.

How many threads those large factorizations get:

* ``LTI_AUDIT_BLAS_THREADS=K`` in the environment: K everywhere (also for the
  small work), as before;
* otherwise :func:`set_audit_threads` (the command line's single audits --
  ``compare``, ``inspect``, ``convert``, ``check`` -- set it to the number of cores
  with ``LTI_AUDIT_THREADS`` to override, e.g. ``LTI_AUDIT_THREADS=1``);
* otherwise 1: library calls, stress campaigns and the service keep one thread per
  audit (they run audits side by side);

and never more than :func:`idle_cores` (unless ``LTI_AUDIT_BLAS_THREADS`` is set).
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator

WIDE_MIN_ORDER = 300
"""Dense factorizations of at least this order may use :func:`audit_threads` threads."""

_audit_threads = 1


def blas_threads() -> int:
    """Number of BLAS threads for the small work of an audit (``LTI_AUDIT_BLAS_THREADS``, default 1)."""
    try:
        return max(1, int(os.environ.get("LTI_AUDIT_BLAS_THREADS", "1")))
    except ValueError:
        return 1


def audit_threads() -> int:
    """Threads for the large dense factorizations of one audit (see the module docstring)."""
    if "LTI_AUDIT_BLAS_THREADS" in os.environ:
        return blas_threads()
    return _audit_threads


def set_audit_threads(count: int | None = None) -> int:
    """Let large factorizations of this process's audits use ``count`` threads.

    ``None``: ``LTI_AUDIT_THREADS`` if set, else the number of usable cores.
    Returns the value set.  Front ends that run one audit at a time call this;
    campaigns and the service do not (one thread per audit).
    """
    global _audit_threads
    if count is None:
        env = os.environ.get("LTI_AUDIT_THREADS")
        try:
            count = int(env) if env else len(os.sched_getaffinity(0))
        except (ValueError, AttributeError):
            count = os.cpu_count() or 1
    _audit_threads = max(1, int(count))
    return _audit_threads


def idle_cores() -> int:
    """Cores not busy with other processes: ``cores - (1-minute load - 1)``, at least 1.

    Spinning BLAS threads on a core another process uses are catastrophic (measured on
    the 2-core reference machine under a load of 7: a 1400 x 1400 eigenvalue problem
    took 4.1 s on one thread and 45 s on two), so extra threads are only taken when
    the load average says the cores are free (common practice, no source).
    """
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        cores = os.cpu_count() or 1
    try:
        load = os.getloadavg()[0]
    except (OSError, AttributeError):  # pragma: no cover
        return 1
    return max(1, int(cores - max(0.0, load - 1.0) + 0.25))


def _load_blas_users() -> None:
    # load every BLAS-linked extension first: threadpoolctl limits only the
    # libraries loaded when the limit is set
    import scipy.linalg  # noqa: F401

    try:
        import slycot  # noqa: F401
    except ImportError:  # pragma: no cover
        pass


@contextlib.contextmanager
def limited_blas_threads() -> Iterator[None]:
    """Run the enclosed numerics with :func:`blas_threads` BLAS threads."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - declared dependency
        yield
        return
    _load_blas_users()
    with threadpool_limits(limits=blas_threads(), user_api="blas"):
        yield


@contextlib.contextmanager
def wide_blas_threads(order: int) -> Iterator[None]:
    """Run one large dense factorization of ``order`` with :func:`audit_threads` threads.

    Below :data:`WIDE_MIN_ORDER`, or with one audit thread, nothing changes.
    """
    threads = audit_threads()
    if threads > 1 and "LTI_AUDIT_BLAS_THREADS" not in os.environ:
        threads = min(threads, idle_cores())
    if order < WIDE_MIN_ORDER or threads <= 1:
        yield
        return
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - declared dependency
        yield
        return
    _load_blas_users()
    with threadpool_limits(limits=threads, user_api="blas"):
        yield
