"""An adaptive frequency grid for one or more models (grid construction).

Frequency grid
--------------
:func:`adaptive_frequency_grid` places logarithmically spaced points over the band
spanned by all pole (and optional zero) frequencies, adds DC, a high-frequency limit
(continuous time) or the Nyquist frequency (discrete time), and refines around each
lightly damped pole over a window proportional to its bandwidth ``zeta * omega``
(common practice, no source).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

from audit.core.realization import Realization, same_time_domain
from audit.errors import IncompatibleModelsError, InvalidModelError
from audit.evidence.inputs import real_frequencies

FloatArray = NDArray[np.float64]

__all__ = ["adaptive_frequency_grid"]


def _mode_frequencies(
    roots: ArrayLike, sample_period: float | None
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Natural frequency |s|, damped frequency |Im s| and |Re s| of each root.

    Discrete-time roots are mapped by ``s = log(z) / T``; roots at ``z = 0`` are
    dropped (they have no frequency).
    """
    lam = np.asarray(roots, dtype=complex).ravel()
    lam = lam[np.isfinite(lam)]
    if sample_period is not None:
        lam = lam[np.abs(lam) > 0]
        lam = np.log(lam) / sample_period
    return np.abs(lam), np.abs(lam.imag), np.abs(lam.real)


def adaptive_frequency_grid(
    realizations: Sequence[Realization],
    *,
    points_per_decade: int = 20,
    extra: ArrayLike = (),
    zeros: ArrayLike = (),
    decades_beyond: float = 2.0,
    refine_points: int = 15,
) -> FloatArray:
    """A frequency grid [rad/s] adapted to the dynamics of one or more models.

    The grid contains DC (``omega = 0``), logarithmically spaced points between
    ``10**-decades_beyond`` times the slowest and ``10**decades_beyond`` times the
    fastest pole/zero frequency (continuous time; discrete time stops exactly at the
    Nyquist frequency ``pi / T``, which is included), every pole and zero frequency
    ``|lam|`` and damped frequency ``|Im lam|`` (discrete: of ``log(z) / T``), and
    ``refine_points`` points clustered within a few bandwidths ``|Re lam|``
    (``~ zeta omega``) of each lightly damped mode.

    Parameters
    ----------
    realizations : sequence of Realization
        All in the same time domain (same sample period).
    points_per_decade : int, keyword-only
        Density of the logarithmic base grid.
    extra : (q,) array_like, keyword-only
        Extra frequencies [rad/s] to include (e.g. transmission-zero frequencies).
    zeros : (z,) array_like of complex, keyword-only
        Zeros in the s-plane (continuous) or z-plane (discrete); treated like poles.
    decades_beyond : float, keyword-only
        How far (in decades) the base grid reaches beyond the slowest and fastest
        dynamics.
    refine_points : int, keyword-only
        Number of points placed around each lightly damped mode.

    Returns
    -------
    (k,) float ndarray
        Sorted, non-negative, without near-duplicates (relative spacing 1e-12).

    Raises
    ------
    InvalidModelError
        If no realization is given, or an option is out of range.
    IncompatibleModelsError
        If the realizations do not share a time domain.

    Examples
    --------
    >>> from audit.core.realization import Realization
    >>> r = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]])
    >>> w = adaptive_frequency_grid([r])
    >>> bool(w[0] == 0.0 and w[-1] >= 100.0)
    True
    """
    reals = _checked_models(realizations, points_per_decade, refine_points, decades_beyond)
    period = reals[0].sample_period
    extra_w = np.abs(real_frequencies(extra, "extra"))
    zeros_arr = np.asarray(zeros, dtype=complex).ravel()
    if zeros_arr.size and not np.all(np.isfinite(zeros_arr)):
        raise InvalidModelError("zeros: contains NaN or infinity", field="zeros")

    roots = [r.poles() for r in reals] + [zeros_arr]
    all_roots = np.concatenate(roots) if roots else np.zeros(0, dtype=complex)
    wn, wd, sig = _mode_frequencies(all_roots, period)
    nyquist = math.pi / period if period is not None else math.inf

    pieces = [np.array([0.0]),
              _logarithmic_base(wn, wd, extra_w, period, nyquist,
                                points_per_decade=points_per_decade,
                                decades_beyond=decades_beyond)]
    pieces += [wn, wd, extra_w]
    if period is not None:
        pieces.append(np.array([nyquist]))
    pieces += _resonance_clusters(wn, wd, sig, refine_points)
    return _merged(pieces, period, nyquist)


def _checked_models(realizations: Sequence[Realization], points_per_decade: int,
                    refine_points: int, decades_beyond: float) -> list[Realization]:
    """The models as a list, after checking the options and the common time domain."""
    reals = list(realizations)
    if not reals:
        raise InvalidModelError(
            "realizations: is empty but at least one model was expected",
            field="realizations",
        )
    if points_per_decade < 1:
        raise InvalidModelError(
            f"points_per_decade={points_per_decade!r}: expected an integer >= 1",
            field="points_per_decade",
        )
    if refine_points < 0:
        raise InvalidModelError(
            f"refine_points={refine_points!r}: expected an integer >= 0",
            field="refine_points",
        )
    if not (decades_beyond >= 0 and math.isfinite(decades_beyond)):
        raise InvalidModelError(
            f"decades_beyond={decades_beyond!r}: expected a finite number >= 0",
            field="decades_beyond",
        )
    for other in reals[1:]:
        if not same_time_domain(reals[0], other):
            raise IncompatibleModelsError(
                "realizations: all models on one frequency grid must share the time "
                f"domain, but sample periods {reals[0].sample_period!r} and "
                f"{other.sample_period!r} were given"
            )
    return reals


def _logarithmic_base(wn: FloatArray, wd: FloatArray, extra_w: FloatArray,
                      period: float | None, nyquist: float, *, points_per_decade: int,
                      decades_beyond: float) -> FloatArray:
    """Logarithmically spaced points from ``10**-decades_beyond`` times the slowest to
    ``10**decades_beyond`` times the fastest dynamics (discrete: up to Nyquist)."""
    positive = np.concatenate([wn[wn > 0], wd[wd > 0], extra_w[extra_w > 0]])
    positive = positive[np.isfinite(positive)]
    if period is not None:
        positive = positive[positive <= nyquist]
    if positive.size:
        w_lo, w_hi = float(positive.min()), float(positive.max())
    elif period is not None:
        w_lo, w_hi = nyquist * 1e-3, nyquist
    else:
        w_lo, w_hi = 1.0, 1.0
    lo = w_lo * 10.0 ** (-decades_beyond)
    hi = min(w_hi * 10.0 ** decades_beyond, nyquist)
    if period is not None:
        lo = min(lo, nyquist * 1e-3)
        hi = nyquist
    decades = max(math.log10(hi / lo), 0.0)
    count = max(2, int(math.ceil(decades * points_per_decade)) + 1)
    return np.logspace(math.log10(lo), math.log10(hi), count)


def _resonance_clusters(wn: FloatArray, wd: FloatArray, sig: FloatArray,
                        refine_points: int) -> list[FloatArray]:
    """``refine_points`` points around each lightly damped mode (damping ratio < 0.5).

    Points within a few bandwidths of each mode, denser near the centre: offsets in
    units of ``|Re lam|`` (the half-power half-width of a lightly damped resonance;
    common practice, no source).
    """
    if refine_points <= 0:
        return []
    clusters = []
    t = np.sinh(np.linspace(-3.0, 3.0, refine_points)) * (4.0 / math.sinh(3.0))
    light = (sig < 0.5 * wn) & (wn > 0)  # damping ratio below 0.5
    for centre, width in zip(
        np.concatenate([wd[light], wn[light]]), np.concatenate([sig[light], sig[light]])
    ):
        width = max(float(width), 1e-12 * float(centre))
        clusters.append(centre + width * t)
    return clusters


def _merged(pieces: list[FloatArray], period: float | None, nyquist: float) -> FloatArray:
    """One sorted grid: finite, non-negative, with DC, without near-duplicates (relative
    spacing 1e-12); discrete time stops at the Nyquist frequency, appended last."""
    grid = np.concatenate([np.ravel(p) for p in pieces])
    grid = grid[np.isfinite(grid) & (grid >= 0)]
    if period is not None:
        # nothing beyond Nyquist; the Nyquist frequency itself is appended last
        grid = grid[grid < nyquist * (1 - 1e-12)]
    grid = np.unique(np.append(grid, 0.0))
    keep = np.ones(grid.size, dtype=bool)
    keep[1:] = np.diff(grid) > 1e-12 * grid[1:]
    grid = grid[keep]
    if period is not None:
        grid = np.append(grid, nyquist)
    return grid.astype(float)
