"""Sparse state-space models: documents, .npz files, and the sampled sparse-LU route.

Scenario (invented, benchmarks/_sparse_cases.py): a steel bar in a reheating line heated
by an induction coil at one end, finite differences on n nodes (symmetric tridiagonal A).
References are named beside each check.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Any

import mpmath
import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp

from audit.cli import main
from audit.documents.schema import validate_model_document
from audit.errors import InvalidModelError
from audit.documents.loading import load_model_document, realization_from_document
from audit.documents.sparse import (
    SPARSE_ROUTE_MIN_ORDER,
    SparseRealization,
    compare_sparse_pair,
    model_for_comparison,
    save_sparse_model_npz,
    sparse_response,
    spectrum_extent,
)

BENCH = Path(__file__).resolve().parent.parent / "benchmarks"
if str(BENCH) not in sys.path:
    sys.path.insert(0, str(BENCH))

from _sparse_cases import LOSS, as_document, krylov_reduced, reheating_bar  # noqa: E402

N_SUITE = 2000  # states of the suite's sparse model (above SPARSE_ROUTE_MIN_ORDER)


@pytest.fixture(scope="module")
def bar() -> SparseRealization:
    return reheating_bar(N_SUITE)


def _small_document() -> dict[str, Any]:
    return {"lti_model": 1, "name": "coil zone", "sample_period": None,
            "sparse_state_space": {
                "a": {"shape": [3, 3], "rows": [0, 1, 1, 2, 2], "cols": [0, 0, 1, 1, 2],
                      "values": [-1.0, 0.5, -2.0, 0.25, -3.0]},
                "b": {"shape": [3, 1], "rows": [0], "cols": [0], "values": [1.0]},
                "c": {"shape": [1, 3], "rows": [0], "cols": [2], "values": [2.0]},
                "d": {"shape": [1, 1], "rows": [], "cols": [], "values": []}}}


# ------------------------------------------------------------------ documents
def test_triplet_document_gives_the_written_matrices():
    doc = validate_model_document(_small_document())
    assert doc.representation == "sparse_state_space"
    assert (doc.n_outputs, doc.n_inputs, doc.stated_order) == (1, 1, 3)
    r = realization_from_document(doc)  # small sparse documents become dense realizations
    expected_a = np.array([[-1.0, 0, 0], [0.5, -2.0, 0], [0, 0.25, -3.0]])
    np.testing.assert_array_equal(r.a, expected_a)  # exact: the written entries
    # G(0) = -C A^-1 B, by a scipy dense solve (independent route), rtol 1e-14
    g0 = -r.c @ scipy.linalg.solve(expected_a, np.array([[1.0], [0], [0]]))
    assert abs(g0[0, 0] - 2.0 * (0.5 * 0.25) / (1.0 * 2.0 * 3.0)) <= 1e-14  # hand algebra


def _with_a(a: dict[str, Any]) -> dict[str, Any]:
    data = _small_document()
    data["sparse_state_space"]["a"] = a
    return data


@pytest.mark.parametrize("a, path, fragment", [
    ({"shape": [3, 3], "rows": [0, 3], "cols": [0, 0], "values": [1.0, 1.0]},
     "sparse_state_space.a.rows[1]", "outside 0..2"),
    ({"shape": [3, 3], "rows": [0, 1], "cols": [0, -1], "values": [1.0, 1.0]},
     "sparse_state_space.a.cols[1]", "outside 0..2"),
    ({"shape": [3, 3], "rows": [1, 1], "cols": [2, 2], "values": [1.0, 1.0]},
     "sparse_state_space.a.rows[1]", "repeats position (1, 2)"),
    ({"shape": [3, 3], "rows": [0], "cols": [0], "values": [float("nan")]},
     "sparse_state_space.a.values[0]", "NaN is not allowed"),
    ({"shape": [3, 3], "rows": [0], "cols": [0], "values": [float("inf")]},
     "sparse_state_space.a.values[0]", "infinity is not allowed"),
    ({"shape": [3, 3], "rows": [0, 1], "cols": [0], "values": [1.0]},
     "sparse_state_space.a", "same length"),
    ({"shape": [3, 2], "rows": [], "cols": [], "values": []},
     "sparse_state_space.a.shape", "must be square"),
    ({"shape": [3, 3], "rows": [0.0], "cols": [0], "values": [1.0]},
     "sparse_state_space.a.rows[0]", ""),
])
def test_bad_triplets_name_the_field(a, path, fragment):
    with pytest.raises(InvalidModelError) as info:
        validate_model_document(_with_a(a))
    assert str(info.value).startswith(path) or path in str(info.value)
    assert fragment in str(info.value)


def test_shape_mismatch_names_b():
    data = _small_document()
    data["sparse_state_space"]["b"]["shape"] = [4, 1]
    with pytest.raises(InvalidModelError, match=r"sparse_state_space\.b\.shape: is 4x1"):
        validate_model_document(data)


def test_two_representations_are_refused():
    data = _small_document()
    data["state_space"] = {"a": [[-1.0]], "b": [[1.0]], "c": [[1.0]], "d": [[0.0]]}
    with pytest.raises(InvalidModelError, match="2 representations given"):
        validate_model_document(data)


def test_npz_triplets_round_trip(tmp_path, bar):
    path = tmp_path / "bar.npz"
    save_sparse_model_npz(path, bar.a, bar.b, bar.c, bar.d)
    doc = load_model_document(path)
    assert doc.representation == "sparse_state_space" and doc.stated_order == N_SUITE
    r = model_for_comparison(doc)
    assert isinstance(r, SparseRealization)
    assert (r.a != bar.a).nnz == 0  # exact round trip of the stored doubles
    np.testing.assert_array_equal(r.b, bar.b)
    with pytest.raises(FileExistsError):  # never overwrites
        save_sparse_model_npz(path, bar.a, bar.b, bar.c, bar.d)


def test_npz_bad_inputs(tmp_path, bar, monkeypatch):
    arrays = {f"{k}_{part}": v for k, m in zip("abcd", (bar.a, bar.b, bar.c, bar.d))
              for part, v in zip(("shape", "rows", "cols", "values"),
                                 (np.array(sp.coo_matrix(m).shape), sp.coo_matrix(m).row,
                                  sp.coo_matrix(m).col, sp.coo_matrix(m).data))}
    missing = dict(arrays)
    del missing["c_cols"]
    np.savez(tmp_path / "missing.npz", **missing)
    with pytest.raises(InvalidModelError, match="'c_cols' missing"):
        load_model_document(tmp_path / "missing.npz")
    bad = dict(arrays, a_values=arrays["a_values"].astype(object))
    np.savez(tmp_path / "pickled.npz", **bad)
    with pytest.raises(InvalidModelError, match="Python objects"):  # allow_pickle=False kept
        load_model_document(tmp_path / "pickled.npz")
    dup = dict(arrays, a_rows=np.r_[arrays["a_rows"][:-1], arrays["a_rows"][0]],
               a_cols=np.r_[arrays["a_cols"][:-1], arrays["a_cols"][0]])
    np.savez(tmp_path / "dup.npz", **dup)
    with pytest.raises(InvalidModelError, match=r"sparse_state_space\.a\.rows\[\d+\]: entry"):
        load_model_document(tmp_path / "dup.npz")
    monkeypatch.setenv("LTI_AUDIT_MAX_ARRAY_BYTES", "1000")  # decompressed-size limit kept
    np.savez(tmp_path / "big.npz", **arrays)
    with pytest.raises(InvalidModelError, match="exceed the limit of 1000 bytes"):
        load_model_document(tmp_path / "big.npz")


def test_cli_bad_sparse_document_exits_2_naming_the_field(capsys, tmp_path):
    data = _with_a({"shape": [3, 3], "rows": [0, 5], "cols": [0, 0], "values": [1.0, 1.0]})
    (tmp_path / "bad.json").write_text(json.dumps(data))
    (tmp_path / "ok.json").write_text(json.dumps(_small_document()))
    code = main(["compare", str(tmp_path / "ok.json"), str(tmp_path / "bad.json")])
    err = capsys.readouterr().err
    assert code == 2
    assert "sparse_state_space.a.rows[1]" in err and "Traceback" not in err


# ------------------------------------------------------------- frequency response
def _mpmath_tridiagonal_response(r: SparseRealization, omega: float, dps: int = 40) -> complex:
    """C (j w I - A)^-1 B of the STORED doubles, by the Thomas algorithm in mpmath at
    ``dps`` digits (independent of scipy; A tridiagonal, B = b0 e_0, C = e_k)."""
    mpmath.mp.dps = dps
    a = r.a.tocsr()
    n = a.shape[0]
    z = mpmath.mpc(0, omega)
    diag = [z - mpmath.mpf(float(a[i, i])) for i in range(n)]
    low = [-mpmath.mpf(float(a[i + 1, i])) for i in range(n - 1)]
    up = [-mpmath.mpf(float(a[i, i + 1])) for i in range(n - 1)]
    rhs = [mpmath.mpf(float(v)) for v in r.b[:, 0]]
    for i in range(1, n):  # forward elimination
        f = low[i - 1] / diag[i - 1]
        diag[i] -= f * up[i - 1]
        rhs[i] -= f * rhs[i - 1]
    x = [mpmath.mpf(0)] * n
    x[-1] = rhs[-1] / diag[-1]
    for i in range(n - 2, -1, -1):
        x[i] = (rhs[i] - up[i] * x[i + 1]) / diag[i]
    k = int(np.flatnonzero(r.c[0])[0])
    return complex(mpmath.mpf(float(r.c[0, k])) * x[k])


def test_sparse_response_and_error_estimate_against_mpmath(bar):
    omegas = np.array([0.0, 3e-5, 4e-4, 2e-3])
    g, err = sparse_response(bar, omegas)
    for i, w in enumerate(omegas):
        ref = _mpmath_tridiagonal_response(bar, float(w))  # mpmath, 40 digits, stored data
        actual = abs(g[i, 0, 0] - ref)
        assert actual <= max(err[i], 1e-300)  # the estimate covers the actual error
        assert actual <= 1e-11 * abs(ref)  # and the values are accurate (measured ~1e-15)
        assert err[i] <= 1e-9 * abs(ref)  # the estimate is not vacuous


def test_spectrum_extent_brackets_the_eigenvalues():
    small = reheating_bar(300)
    low, high, _ = spectrum_extent(small)
    eig = np.linalg.eigvalsh(small.a.toarray())  # LAPACK dense symmetric eigenvalues
    assert high >= np.max(np.abs(eig)) * (1 - 1e-12)  # Gershgorin: an upper bound
    assert abs(low - np.min(np.abs(eig))) <= 1e-3 * np.min(np.abs(eig))  # Arnoldi tol 1e-3


# -------------------------------------------------------------------- verdicts
def test_bar_against_its_dense_copy_is_equivalent_on_the_sampled_grid(bar):
    dense = bar.to_dense()
    opt_in = compare_sparse_pair(bar, dense, accept_sampled=True)
    assert opt_in.verdict == "equivalent"
    assert "EQUIVALENT ON THE SAMPLED GRID" in opt_in.explanation
    assert "not a bound over all frequencies" in opt_in.explanation
    default = compare_sparse_pair(bar, dense)
    assert default.verdict == "inconclusive"  # sampled evidence needs the opt-in
    assert "--accept-sampled" in default.explanation


def test_moved_loss_coefficient_is_different(bar):
    moved = reheating_bar(N_SUITE, loss=LOSS * (1 + 1e-3))
    pc = compare_sparse_pair(bar, moved)
    assert pc.verdict == "different"
    ev = pc.evidence[0]
    # the DC gains by a scipy sparse direct solve (independent of the grid and of the
    # refinement), G(0) = -C A^-1 B; their difference relative to the larger one is
    # about 1e-3 x (loss share of the DC gain), far above rtol 1e-5
    from scipy.sparse.linalg import spsolve

    g0 = [float(-(m.c @ spsolve(m.a.tocsc(), m.b[:, 0]))[0]) for m in (bar, moved)]
    assert abs(g0[0] - g0[1]) / max(map(abs, g0)) >= 1e-4
    assert ev.details["difference_peak_on_grid"] >= 0.5 * abs(g0[0] - g0[1])  # rtol 0.5


def test_krylov_reduced_model_is_equivalent_and_checked_against_scipy(bar):
    reduced = krylov_reduced(bar)
    assert reduced.order < 100
    pc = compare_sparse_pair(bar, reduced, accept_sampled=True)
    assert pc.verdict == "equivalent"
    # independent check at a few frequencies: scipy sparse direct solve of the full model
    # vs scipy dense solve of the reduced one, relative to the DC gain, tolerance 1e-5
    from scipy.sparse.linalg import spsolve

    scale = abs(float(-(bar.c @ spsolve(bar.a.tocsc(), bar.b[:, 0]))[0]))
    for w in (0.0, 1e-4, 1e-3):
        m = (1j * w * sp.identity(N_SUITE) - bar.a).tocsc()
        full = complex((bar.c @ spsolve(m, bar.b[:, 0].astype(complex)))[0])
        red = complex((reduced.c @ scipy.linalg.solve(
            1j * w * np.eye(reduced.order) - reduced.a, reduced.b))[0, 0])
        assert abs(full - red) <= 1e-5 * scale


def test_balanced_truncation_reduced_model_at_small_size():
    """Balanced truncation of a 200-node bar by python-control (control.balred, SLICOT
    AB09AD through slycot), checked against python-control's frequency response and the
    twice-the-tail H-infinity error bound (Enns 1984 / Glover 1984: ||G - Gr||_inf <= 2
    sum of the discarded Hankel singular values)."""
    import control

    from audit.core.realization import Realization

    small = reheating_bar(200)
    full = control.ss(small.a.toarray(), small.b, small.c, small.d)
    hsv = np.real(np.asarray(control.hsvd(full)))
    k = 16
    red = control.balred(full, k, method="truncate")
    reduced = Realization.from_arrays(red.A, red.B, red.C, red.D, None, name="bt")
    bound = 2.0 * float(np.sum(hsv[k:]))
    omegas = np.r_[0.0, np.geomspace(1e-6, 10.0, 40)]
    g, err = sparse_response(small, omegas)
    ref = full.frequency_response(omegas).frdata[0, 0]  # python-control, dense
    assert np.max(np.abs(g[:, 0, 0] - ref)) <= 1e-12 * np.max(np.abs(ref))
    peak = float(np.max(np.abs(ref)))
    assert bound <= 1e-6 * peak  # 16 states suffice for this bar (measured 6e-7)
    pc = compare_sparse_pair(small, reduced, rtol=1e-5, accept_sampled=True)
    assert pc.verdict == "equivalent"
    # the sampled difference respects the a-priori bound (with the error estimates)
    ev = pc.evidence[0]
    assert ev.details["difference_peak_on_grid"] <= bound + ev.details["largest_error_estimate"]
    # a 4-state truncation breaks the bound 1e-5 x peak: proven different at a grid point
    crude = control.balred(full, 4, method="truncate")
    if 2.0 * float(np.sum(hsv[1:4])) > 1e-3 * peak:  # the discarded part is visible
        pc4 = compare_sparse_pair(small, Realization.from_arrays(
            crude.A, crude.B, crude.C, crude.D, None, name="bt4"), rtol=1e-5)
        assert pc4.verdict == "different"


# ------------------------------------------------------------------- CLI route
def test_cli_compare_takes_the_sparse_route(capsys, tmp_path, bar):
    assert bar.order > SPARSE_ROUTE_MIN_ORDER
    (tmp_path / "bar.json").write_text(json.dumps(as_document(bar.with_name("bar"))))
    save_sparse_model_npz(tmp_path / "copy.npz", bar.a, bar.b, bar.c, bar.d)
    moved = reheating_bar(N_SUITE, loss=LOSS * (1 + 1e-3), name="moved")
    (tmp_path / "moved.json").write_text(json.dumps(as_document(moved)))
    code = main(["compare", str(tmp_path / "bar.json"), str(tmp_path / "copy.npz"),
                 "--format", "json"])
    report = json.loads(capsys.readouterr().out)
    assert code == 3 and report["verdict"] == "inconclusive"
    assert report["comparisons"][0]["evidence"][0]["key"] == "sampled_difference_peak"
    code = main(["compare", str(tmp_path / "bar.json"), str(tmp_path / "copy.npz"),
                 "--accept-sampled"])
    out = capsys.readouterr().out
    assert code == 0 and "EQUIVALENT ON THE SAMPLED GRID" in out
    code = main(["compare", str(tmp_path / "bar.json"), str(tmp_path / "moved.json")])
    assert code == 1
    capsys.readouterr()
    code = main(["compare", str(tmp_path / "bar.json"), str(tmp_path / "moved.json"),
                 "--format", "html", "-o", str(tmp_path / "r.html")])
    assert code == 2 and "does not draw sparse models" in capsys.readouterr().err
    assert not (tmp_path / "r.html").exists()


def test_dense_only_commands_refuse_sparse_models_above_the_dense_limit():
    from audit.documents.schema import MAX_ORDER

    big = reheating_bar(MAX_ORDER + 1, name="long bar")
    doc = validate_model_document(as_document(big))
    with pytest.raises(InvalidModelError, match="only 'lti-audit compare' handles"):
        realization_from_document(doc)


def test_discrete_time_sparse_model_on_the_unit_circle():
    """Forward-Euler sampled bar (T = 1 s, stable since T |lambda|max < 2): values at
    z = exp(j w T) against a scipy dense solve (rtol 1e-11), verdicts against a dense copy
    (equivalent on the grid) and a moved loss (different)."""
    cont = reheating_bar(1200)
    period = 1.0
    ad = (sp.identity(1200) + period * cont.a).tocsr()
    disc = SparseRealization(ad, period * cont.b, cont.c, cont.d, period, "sampled bar")
    omegas = np.array([0.0, 1e-3, 0.5, np.pi])
    g, err = sparse_response(disc, omegas)
    dense_a = ad.toarray()
    for i, w in enumerate(omegas):
        z = np.exp(1j * w * period)
        ref = (disc.c @ scipy.linalg.solve(z * np.eye(1200) - dense_a, disc.b))[0, 0]
        assert abs(g[i, 0, 0] - ref) <= 1e-11 * abs(ref) + err[i]
    assert compare_sparse_pair(disc, disc.to_dense(), accept_sampled=True).verdict == "equivalent"
    moved = SparseRealization((sp.identity(1200) + period * reheating_bar(
        1200, loss=LOSS * 1.001).a).tocsr(), disc.b, disc.c, disc.d, period, "moved")
    assert compare_sparse_pair(disc, moved).verdict == "different"


def test_rescaled_permuted_slab_is_equivalent_and_values_agree():
    """A 2-D floor slab (400 nodes) against a copy with states scaled by powers of two and
    permuted (exact in floating point): same G at every point, by a scipy dense solve of
    the original (rtol 1e-10) and on the sampled grid."""
    from _sparse_cases import floor_slab

    slab = floor_slab(20)
    rng = np.random.default_rng(3)
    n = slab.order
    perm = sp.identity(n, format="csr")[rng.permutation(n)]
    scale = sp.diags(2.0 ** rng.integers(-6, 7, n))
    inv = sp.diags(1.0 / scale.diagonal())
    copy = SparseRealization.from_arrays(perm @ scale @ slab.a @ inv @ perm.T,
                                         perm @ (scale @ slab.b), slab.c @ inv @ perm.T,
                                         slab.d, None, "slab, refactored")
    omegas = np.array([0.0, 1e-6, 1e-4])
    g, err = sparse_response(copy, omegas)
    dense = slab.a.toarray()
    for i, w in enumerate(omegas):
        ref = (slab.c @ scipy.linalg.solve(1j * w * np.eye(n) - dense, slab.b))[0, 0]
        assert abs(g[i, 0, 0] - ref) <= 1e-10 * abs(ref) + err[i]
    assert compare_sparse_pair(slab, copy, accept_sampled=True).verdict == "equivalent"
