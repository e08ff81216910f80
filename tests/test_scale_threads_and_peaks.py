"""Thread policy of large audits, and the peak-gain search on published models.

References: threadpoolctl's own report of the BLAS thread count (library); SLICOT
AB13DD through slycot for the peak gain (independent routine); the published
model-reduction benchmark models of Y. Chahlaoui and P. Van Dooren, SLICOT Working
Note 2002-2 (copied to benchmarks/data/).
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest
import slycot
from threadpoolctl import threadpool_info

from audit.core import threads as _threads
from audit.documents.loading import load_realization
from audit.evidence.peak_gain import peak_gain

DATA = Path(__file__).resolve().parent.parent / "benchmarks" / "data"


def _blas_threads_now() -> int:
    return max(info["num_threads"] for info in threadpool_info() if info["user_api"] == "blas")


@pytest.fixture()
def restore_threads():
    saved = _threads._audit_threads
    yield
    _threads._audit_threads = saved


def test_library_default_keeps_one_thread_for_large_factorizations(monkeypatch, restore_threads) -> None:
    monkeypatch.delenv("LTI_AUDIT_BLAS_THREADS", raising=False)
    _threads._audit_threads = 1  # what library calls, campaigns and the service get
    with _threads.limited_blas_threads():
        with _threads.wide_blas_threads(5000):
            assert _blas_threads_now() == 1


def test_single_audit_uses_idle_cores_only(monkeypatch, restore_threads) -> None:
    monkeypatch.delenv("LTI_AUDIT_BLAS_THREADS", raising=False)
    monkeypatch.delenv("LTI_AUDIT_THREADS", raising=False)
    monkeypatch.setattr(_threads.os, "sched_getaffinity", lambda pid: {0, 1}, raising=False)
    assert _threads.set_audit_threads() == 2
    monkeypatch.setattr(_threads.os, "getloadavg", lambda: (1.0, 1.0, 1.0))  # only us
    assert _threads.idle_cores() == 2
    with _threads.limited_blas_threads():
        with _threads.wide_blas_threads(5000):
            assert _blas_threads_now() == 2
        with _threads.wide_blas_threads(10):  # small problems stay on one thread
            assert _blas_threads_now() == 1
    monkeypatch.setattr(_threads.os, "getloadavg", lambda: (3.0, 3.0, 3.0))  # both cores busy
    assert _threads.idle_cores() == 1
    with _threads.limited_blas_threads():
        with _threads.wide_blas_threads(5000):
            assert _blas_threads_now() == 1


def test_environment_overrides(monkeypatch, restore_threads) -> None:
    monkeypatch.setenv("LTI_AUDIT_THREADS", "1")
    assert _threads.set_audit_threads() == 1
    monkeypatch.setenv("LTI_AUDIT_BLAS_THREADS", "1")
    _threads._audit_threads = 2
    assert _threads.audit_threads() == 1


@pytest.mark.parametrize("name", ["cdplayer120", "build48"])
def test_peak_gain_of_published_models_agrees_with_slycot_ab13dd(name: str) -> None:
    r = load_realization(DATA / f"{name}.json")
    ours = peak_gain(r)
    n, m, p = r.order, r.n_inputs, r.n_outputs
    import numpy as np

    ref, _ = slycot.ab13dd("C", "I", "N", "D", n, m, p, np.array(r.a), np.eye(n),
                           np.array(r.b), np.array(r.c), np.array(r.d), 1e-10)
    assert ours.certified
    # AB13DD's own tolerance is 1e-10 relative; ours brackets within 2 rtol
    assert math.isclose(ours.value, float(ref), rel_tol=1e-8)
    assert ours.lower <= float(ref) * (1 + 1e-8) and ours.upper >= float(ref) * (1 - 1e-8)
    # the polished lower bound lets few eigenvalue tests certify
    assert ours.iterations <= 3


def test_stop_above_skips_the_eigenvalue_tests_only_when_proven() -> None:
    # G(s) = w0^2 / (s^2 + 2 zeta w0 s + w0^2): peak 1 / (2 zeta sqrt(1 - zeta^2))
    # (closed form, common practice)
    import numpy as np

    from audit.core.realization import Realization

    zeta, w0 = 0.05, 3.0
    r = Realization.from_arrays([[0.0, 1.0], [-w0**2, -2 * zeta * w0]], [[0.0], [w0**2]],
                                [[1.0, 0.0]], [[0.0]])
    exact = 1.0 / (2 * zeta * math.sqrt(1 - zeta**2))
    quick = peak_gain(r, stop_above=0.5 * exact)
    assert quick.iterations == 0 and not quick.certified and quick.upper == math.inf
    assert 0.5 * exact < quick.lower <= exact * (1 + 1e-12)
    full = peak_gain(r, stop_above=2.0 * exact)  # not exceeded: the usual certificate
    assert full.certified and full.iterations >= 1
    assert math.isclose(full.value, exact, rel_tol=1e-9)
    # discrete time goes through the bilinear transform with the same rule
    rd = Realization.from_arrays(np.array([[0.5]]), [[1.0]], [[1.0]], [[0.0]], 0.1)
    q = peak_gain(rd, stop_above=1.0)  # peak 1 / (1 - 0.5) = 2 at z = 1 (closed form)
    assert not q.certified and q.lower > 1.0 and math.isclose(q.value, 2.0, rel_tol=1e-12)
