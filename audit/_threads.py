"""BLAS threading policy.

lti-audit works on many small and medium matrices (n up to a few hundred). For those,
multi-threaded BLAS only adds synchronisation, and on a loaded machine OpenBLAS's
spinning threads can make an audit 10-50x slower (measured: a 100-state SISO audit took
1.4 s single-threaded and 70 s with default threads while another process used a
core). Audits therefore run with one BLAS thread unless the user sets
``LTI_AUDIT_BLAS_THREADS``.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator


def blas_threads() -> int:
    """Number of BLAS threads for an audit (``LTI_AUDIT_BLAS_THREADS``, default 1)."""
    try:
        return max(1, int(os.environ.get("LTI_AUDIT_BLAS_THREADS", "1")))
    except ValueError:
        return 1


@contextlib.contextmanager
def limited_blas_threads() -> Iterator[None]:
    """Run the enclosed numerics with :func:`blas_threads` BLAS threads."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - declared dependency
        yield
        return
    # load every BLAS-linked extension first: threadpoolctl limits only the
    # libraries loaded when the limit is set
    import scipy.linalg  # noqa: F401

    try:
        import slycot  # noqa: F401
    except ImportError:  # pragma: no cover
        pass
    with threadpool_limits(limits=blas_threads(), user_api="blas"):
        yield
