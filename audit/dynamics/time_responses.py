"""Time-domain responses, exact for piecewise-constant inputs, and the choice of a time grid
from a model's modes (:func:`response_horizon`). Their comparison is in
:mod:`audit.dynamics.response_comparison`.

Method
------
A continuous model driven by an input held constant over ``[t_k, t_k + h)`` is sampled
exactly by the zero-order-hold transition pair ``Phi = e^{Ah}``,
``Gamma = int_0^h e^{As} ds B``, both read from ONE matrix exponential of the augmented
matrix ``[[A, B], [0, 0]] h`` (C. F. Van Loan, "Computing integrals involving the matrix
exponential", IEEE Trans. Automatic Control 23(3), 1978). The state is then marched,
``x[k+1] = Phi x[k] + Gamma u[k]``, so the samples are exact up to rounding (no ODE
integration error), also for stiff models. Discrete models are marched directly.

Time grids
----------
Times are seconds, strictly increasing, ``>= 0``. The response starts at ``t = 0``; when
``times[0] > 0`` the state is first carried from 0 to ``times[0]`` by one extra
exponential. A uniformly spaced grid (spacings equal within ``1e-9`` relative) uses one
exponential for the whole march; a non-uniform grid uses one exponential per interval
(still exact, costlier). Discrete models need times on their sample grid ``k T``.

Conventions
-----------
* Continuous impulse response: ``y(t) = C e^{At} B`` for ``t >= 0``; the direct term
  ``D delta(t)`` cannot be sampled and is returned separately as
  ``TimeResponse.impulse_feedthrough`` (``D``).
* Discrete impulse response: the unit-pulse response (Markov samples) ``D, CB, CAB, ...``
  at ``k = 0, 1, 2, ...`` (no ``1/T`` scaling).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from audit.dynamics.discretization import zero_order_hold_pair
from audit.errors import InvalidModelError, NumericalTroubleError
from audit.core.realization import Realization

FloatArray = NDArray[np.float64]

# Relative tolerance for "uniform spacing" and "on the sample grid" (common practice,
# no source: times are usually produced by linspace/arange, good to ~1e-15).
GRID_RTOL = 1e-9


def _tolist(x: FloatArray | None) -> Any:
    return None if x is None else np.asarray(x, dtype=float).tolist()


@dataclass(frozen=True, eq=False)
class TimeResponse:
    """Sampled response of a model.

    Attributes
    ----------
    kind : {"impulse", "step", "initial_condition", "piecewise_constant"}
    times : (k,) array
        Seconds.
    outputs : (k, p, m) array for impulse and step responses (last axis: which input was
        excited), (k, p) for initial-condition and piecewise-constant responses.
    states : (k, n, m) or (k, n) array, or None
    impulse_feedthrough : (p, m) array or None
        Continuous impulse responses only: the weight ``D`` of the ``D delta(t)`` term
        not included in ``outputs``.
    sample_period : float or None
        The model's sample period (None: continuous time).
    """

    kind: str
    times: FloatArray
    outputs: FloatArray
    states: FloatArray | None = None
    impulse_feedthrough: FloatArray | None = None
    sample_period: float | None = None

    def as_dict(self) -> dict[str, Any]:
        return {
            "kind": self.kind,
            "times": _tolist(self.times),
            "outputs": _tolist(self.outputs),
            "states": _tolist(self.states),
            "impulse_feedthrough": _tolist(self.impulse_feedthrough),
            "sample_period": self.sample_period,
        }


# ------------------------------------------------------------------ validation
def _check_model(r: Any) -> Realization:
    if not isinstance(r, Realization):
        raise InvalidModelError(
            f"model: got {type(r).__name__} but an audit Realization was expected", field="model"
        )
    return r


def _check_times(times: ArrayLike) -> FloatArray:
    try:
        t = np.asarray(times, dtype=float)
    except (TypeError, ValueError):
        raise InvalidModelError(
            "times: could not be read as numbers; a 1-D array of seconds was expected",
            field="times",
        ) from None
    if t.ndim != 1 or t.size == 0:
        raise InvalidModelError(
            f"times: has shape {t.shape} but a non-empty 1-D array was expected", field="times"
        )
    if not np.all(np.isfinite(t)):
        raise InvalidModelError("times: contains NaN or infinity", field="times")
    if t[0] < 0.0:
        raise InvalidModelError(f"times: starts at {float(t[0])!r} but times >= 0 were expected", field="times")
    if t.size > 1 and not np.all(np.diff(t) > 0.0):
        raise InvalidModelError("times: is not strictly increasing", field="times")
    return t


def _is_uniform(t: FloatArray) -> bool:
    if t.size < 3:
        return True
    dt = np.diff(t)
    h = (t[-1] - t[0]) / (t.size - 1)
    return bool(np.max(np.abs(dt - h)) <= GRID_RTOL * h)


def _sample_indices(t: FloatArray, period: float) -> NDArray[np.int64]:
    k = t / period
    idx = np.rint(k)
    if np.any(np.abs(k - idx) > GRID_RTOL * np.maximum(1.0, idx)):
        bad = float(t[np.argmax(np.abs(k - idx))])
        raise InvalidModelError(
            f"times: {bad!r} is not a multiple of the sample period {period:g} s; a "
            "discrete model's times must lie on its sample grid k*T",
            field="times",
        )
    return idx.astype(np.int64)


# ---------------------------------------------------------------------- core
def _march_continuous(
    r: Realization,
    x_start: FloatArray,
    t: FloatArray,
    inputs: FloatArray,
    lead_input: FloatArray | None,
) -> FloatArray:
    """States at ``t`` (shape (k, n, q)) for inputs (k, m, q) held on [t_j, t_j+1).

    ``x_start`` (n, q) is the state at time 0; ``lead_input`` (m, q) is held on [0, t_0).
    """
    n = r.order
    k = t.size
    q = x_start.shape[1]
    states = np.empty((k, n, q))
    x = x_start.copy()
    if t[0] > 0.0:
        phi0, gam0 = zero_order_hold_pair(r.a, r.b, float(t[0]))
        x = phi0 @ x + (gam0 @ lead_input if lead_input is not None else 0.0)
    states[0] = x
    if k == 1:
        return states
    with np.errstate(over="ignore", invalid="ignore"):  # overflow is checked below
        if _is_uniform(t):
            h = float((t[-1] - t[0]) / (k - 1))
            phi, gam = zero_order_hold_pair(r.a, r.b, h)
            for j in range(k - 1):
                x = phi @ x + gam @ inputs[j]
                states[j + 1] = x
        else:
            for j in range(k - 1):
                phi, gam = zero_order_hold_pair(r.a, r.b, float(t[j + 1] - t[j]))
                x = phi @ x + gam @ inputs[j]
                states[j + 1] = x
    if not np.all(np.isfinite(states)):
        raise NumericalTroubleError(
            "time response overflowed (unstable model over a long horizon?)"
        )
    return states


def _march_discrete(
    r: Realization,
    x_start: FloatArray,
    idx: NDArray[np.int64],
    input_at: Any,
) -> tuple[FloatArray, FloatArray]:
    """States and inputs at the sample indices ``idx``; ``input_at(j)`` gives u[j] (m, q)."""
    n = r.order
    q = x_start.shape[1]
    k = idx.size
    states = np.empty((k, n, q))
    used_inputs = np.empty((k, r.n_inputs, q))
    x = x_start.copy()
    j = 0
    with np.errstate(over="ignore", invalid="ignore"):  # overflow is checked below
        for pos, target in enumerate(idx):
            while j < target:
                x = r.a @ x + r.b @ input_at(j)
                j += 1
            states[pos] = x
            used_inputs[pos] = input_at(int(target))
    if not np.all(np.isfinite(states)):
        raise NumericalTroubleError("time response overflowed (unstable model over a long horizon?)")
    return states, used_inputs


def _outputs(r: Realization, states: FloatArray, inputs: FloatArray) -> FloatArray:
    # states (k, n, q), inputs (k, m, q) -> (k, p, q)
    return np.einsum("pn,knq->kpq", r.c, states) + np.einsum("pm,kmq->kpq", r.d, inputs)


# ------------------------------------------------------------------- public API
def impulse_response(r: Realization, times: ArrayLike) -> TimeResponse:
    """Impulse response, one experiment per input.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    times : (k,) array_like
        Seconds, strictly increasing, ``>= 0`` (on the sample grid for discrete models).

    Returns
    -------
    TimeResponse
        ``outputs : (k, p, m)``, ``states : (k, n, m)``. Continuous: ``C e^{At} B``
        (the ``D delta(t)`` term is in ``impulse_feedthrough``). Discrete: unit-pulse
        response ``D, CB, CAB, ...``.

    Raises
    ------
    InvalidModelError
        Bad ``times`` or not a Realization.
    NumericalTroubleError
        The response overflows.

    Examples
    --------
    >>> r = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]])
    >>> y = impulse_response(r, [0.0, 1.0]).outputs[:, 0, 0]
    >>> [round(float(v), 6) for v in y]
    [1.0, 0.367879]
    """
    r = _check_model(r)
    t = _check_times(times)
    m = r.n_inputs
    if r.is_discrete:
        idx = _sample_indices(t, float(r.sample_period))  # type: ignore[arg-type]
        eye = np.eye(m)
        zero = np.zeros((m, m))
        states, used = _march_discrete(
            r, np.zeros((r.order, m)), idx, lambda j: eye if j == 0 else zero
        )
        y = _outputs(r, states, used)
        return TimeResponse("impulse", t, y, states, None, r.sample_period)
    zeros_in = np.zeros((t.size, m, m))
    states = _march_continuous(r, r.b.copy(), t, zeros_in, None)
    y = np.einsum("pn,knq->kpq", r.c, states)
    return TimeResponse("impulse", t, y, states, r.d.copy(), None)


def step_response(r: Realization, times: ArrayLike) -> TimeResponse:
    """Unit-step response from rest, one experiment per input.

    Parameters
    ----------
    r, times
        As :func:`impulse_response`.

    Returns
    -------
    TimeResponse
        ``outputs : (k, p, m)``, ``states : (k, n, m)``.

    Raises
    ------
    InvalidModelError
        Bad ``times``.
    NumericalTroubleError
        The response overflows.
    """
    r = _check_model(r)
    t = _check_times(times)
    m = r.n_inputs
    eye = np.eye(m)
    if r.is_discrete:
        idx = _sample_indices(t, float(r.sample_period))  # type: ignore[arg-type]
        states, used = _march_discrete(r, np.zeros((r.order, m)), idx, lambda j: eye)
        return TimeResponse("step", t, _outputs(r, states, used), states, None, r.sample_period)
    inputs = np.broadcast_to(eye, (t.size, m, m))
    states = _march_continuous(r, np.zeros((r.order, m)), t, inputs, eye)
    return TimeResponse("step", t, _outputs(r, states, inputs), states, None, None)


def initial_condition_response(r: Realization, x0: ArrayLike, times: ArrayLike) -> TimeResponse:
    """Free response ``y = C e^{At} x0`` (or ``C A^k x0``) with zero input.

    Parameters
    ----------
    r : Realization
    x0 : (n,) array_like
        Initial state at ``t = 0``.
    times : (k,) array_like

    Returns
    -------
    TimeResponse
        ``outputs : (k, p)``, ``states : (k, n)``.

    Raises
    ------
    InvalidModelError
        ``x0`` of the wrong length or not finite; bad ``times``.
    NumericalTroubleError
        The response overflows.
    """
    r = _check_model(r)
    t = _check_times(times)
    x = _check_state(x0, r.order, "x0")
    m = r.n_inputs
    if r.is_discrete:
        idx = _sample_indices(t, float(r.sample_period))  # type: ignore[arg-type]
        zero = np.zeros((m, 1))
        states, _ = _march_discrete(r, x.reshape(-1, 1), idx, lambda j: zero)
    else:
        states = _march_continuous(r, x.reshape(-1, 1), t, np.zeros((t.size, m, 1)), None)
    y = np.einsum("pn,knq->kpq", r.c, states)[:, :, 0]
    return TimeResponse("initial_condition", t, y, states[:, :, 0], None, r.sample_period)


def _check_state(x0: ArrayLike | None, n: int, name: str) -> FloatArray:
    if x0 is None:
        return np.zeros(n)
    try:
        x = np.asarray(x0, dtype=float).ravel()
    except (TypeError, ValueError):
        raise InvalidModelError(f"{name}: could not be read as numbers", field=name) from None
    if x.size != n:
        raise InvalidModelError(
            f"{name}: has {x.size} entries but the model has {n} states", field=name
        )
    if not np.all(np.isfinite(x)):
        raise InvalidModelError(f"{name}: contains NaN or infinity", field=name)
    return x


def piecewise_constant_response(
    r: Realization, times: ArrayLike, inputs: ArrayLike, x0: ArrayLike | None = None
) -> TimeResponse:
    """Response to an input held constant between the given times.

    ``inputs[j]`` is applied on ``[times[j], times[j+1])`` (the last one only at the last
    time); the state at ``times[0]`` is ``x0`` (the model is time-invariant, so the
    time origin is ``times[0]``). For discrete models the held value repeats on every
    sample between two given times.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    times : (k,) array_like
    inputs : (k, m) array_like (or (k,) for a single input)
    x0 : (n,) array_like or None
        Zero when None.

    Returns
    -------
    TimeResponse
        ``outputs : (k, p)``, ``states : (k, n)``.

    Raises
    ------
    InvalidModelError
        Wrong shapes, NaN/inf, bad ``times``.
    NumericalTroubleError
        The response overflows.
    """
    r = _check_model(r)
    t = _check_times(times)
    m = r.n_inputs
    try:
        u = np.asarray(inputs, dtype=float)
    except (TypeError, ValueError):
        raise InvalidModelError("inputs: could not be read as numbers", field="inputs") from None
    if u.ndim == 1 and m == 1:
        u = u.reshape(-1, 1)
    if u.shape != (t.size, m):
        raise InvalidModelError(
            f"inputs: has shape {u.shape} but ({t.size}, {m}) was expected (times x inputs)",
            field="inputs",
        )
    if not np.all(np.isfinite(u)):
        raise InvalidModelError("inputs: contains NaN or infinity", field="inputs")
    x = _check_state(x0, r.order, "x0")
    u3 = u[:, :, None]
    if r.is_discrete:
        period = float(r.sample_period)  # type: ignore[arg-type]
        idx = _sample_indices(t, period)
        rel = idx - idx[0]

        def input_at(j: int) -> FloatArray:
            pos = int(np.searchsorted(rel, j, side="right")) - 1
            return u3[max(pos, 0)]

        states, used = _march_discrete(r, x.reshape(-1, 1), rel, input_at)
    else:
        shifted = t - t[0]
        states = _march_continuous(r, x.reshape(-1, 1), shifted, u3, None)
        used = u3
    y = _outputs(r, states, used)[:, :, 0]
    return TimeResponse("piecewise_constant", t, y, states[:, :, 0], None, r.sample_period)


# ---------------------------------------------------------------- horizon
@dataclass(frozen=True)
class ResponseHorizon:
    """A time grid chosen from a model's modes.

    Attributes
    ----------
    horizon : float
        Seconds.
    time_step : float
        Seconds (the sample period for discrete models).
    n_points : int
    slowest_rate, fastest_rate : float or None
        Decay rate (1/s) of the slowest stable mode; magnitude (1/s) of the fastest mode.
    capped : bool
        True when the point cap made the step coarser than the fastest mode asked for
        (stiff models) or the horizon shorter than the slowest mode asked for.
    note : str
    """

    horizon: float
    time_step: float
    n_points: int
    slowest_rate: float | None
    fastest_rate: float | None
    capped: bool
    note: str = ""

    @property
    def times(self) -> FloatArray:
        """``(n_points,)`` uniformly spaced times from 0."""
        return np.arange(self.n_points) * self.time_step

    def as_dict(self) -> dict[str, Any]:
        return {
            "horizon": self.horizon,
            "time_step": self.time_step,
            "n_points": self.n_points,
            "slowest_rate": self.slowest_rate,
            "fastest_rate": self.fastest_rate,
            "capped": self.capped,
            "note": self.note,
        }


def response_horizon(
    r: Realization,
    *,
    settle_fraction: float = 1e-3,
    points_per_time_constant: int = 10,
    max_points: int = 5000,
    marginal_rtol: float = 1e-9,
    default_horizon: float = 10.0,
) -> ResponseHorizon:
    """Choose a horizon and step for time responses from the model's modes.

    Continuous time, with rates ``sigma = -Re(lambda)`` (a mode is marginal when
    ``|Re lambda| <= marginal_rtol * max(1, max |lambda|)``):

    * horizon ``ln(1/settle_fraction) / sigma_slowest`` over the stable modes (time for
      the slowest mode to decay to ``settle_fraction``);
    * unstable modes cap it at ``ln(1/settle_fraction) / max Re(lambda)`` (time to grow by
      ``1/settle_fraction``), so the responses stay representable;
    * marginal oscillatory modes only: five periods of the slowest one; no time scale at
      all (integrators, order 0): ``default_horizon`` seconds;
    * step ``1 / (points_per_time_constant * max |lambda|)``; if that needs more than
      ``max_points`` points the step is widened to ``horizon / (max_points - 1)`` and
      ``capped`` is set (the samples stay exact; fast transients are just seen sparsely).

    Discrete time: the same with ``sigma = -ln|z| / T``; the step is always ``T``; at
    least ``2 n + 2`` samples; at most ``max_points`` samples (then ``capped``).

    Parameters
    ----------
    r : Realization
    settle_fraction : float
        In (0, 1).
    points_per_time_constant : int
    max_points : int
    marginal_rtol : float
    default_horizon : float
        Seconds, used when no mode gives a time scale.

    Returns
    -------
    ResponseHorizon

    Raises
    ------
    InvalidModelError
        An option out of range.
    """
    r = _check_model(r)
    _check_horizon_options(settle_fraction, points_per_time_constant, max_points)
    decades = math.log(1.0 / settle_fraction)
    notes: list[str] = []
    # eigvals returns a real array when every pole is real: make it complex so that
    # the logarithm of a pole on the negative real axis is ln|z| + j*pi, not NaN
    poles = np.asarray(r.poles(), dtype=complex)
    period, rates, lam_scale = _mode_rates(r, poles)
    horizon, slowest = _modal_horizon(r, poles, period, rates, lam_scale, decades,
                                      marginal_rtol, default_horizon, notes)
    finite_scale = lam_scale[np.isfinite(lam_scale)]
    fastest = float(finite_scale.max()) if finite_scale.size else None
    if r.is_discrete:
        horizon, step, n_pts, capped = _sample_grid(r, horizon, period, max_points, notes)
    else:
        horizon, step, n_pts, capped = _time_grid(horizon, fastest, points_per_time_constant,
                                                  max_points, notes)
    return ResponseHorizon(horizon, step, n_pts, slowest, fastest, capped, "; ".join(notes))


def _check_horizon_options(settle_fraction: float, points_per_time_constant: int,
                           max_points: int) -> None:
    if not (0.0 < settle_fraction < 1.0):
        raise InvalidModelError(
            f"settle_fraction: got {settle_fraction!r} but a value in (0, 1) was expected",
            field="settle_fraction",
        )
    if max_points < 2 or points_per_time_constant < 1:
        raise InvalidModelError(
            f"max_points={max_points!r}, points_per_time_constant={points_per_time_constant!r}: "
            "expected max_points >= 2 and points_per_time_constant >= 1",
            field="max_points",
        )


def _mode_rates(r: Realization, poles: NDArray[np.complex128]) -> tuple[float, FloatArray, FloatArray]:
    """Step 1: (period (0 in continuous time), decay rate ``sigma`` of every mode (1/s;
    negative when growing, +inf for a discrete pole at z = 0), magnitude ``|lambda|`` of
    every mode (1/s; ``|ln z| / T`` in discrete time))."""
    if r.is_discrete:
        period = float(r.sample_period)  # type: ignore[arg-type]
        mag = np.abs(poles)
        with np.errstate(divide="ignore"):
            rates = -np.log(mag) / period  # +inf for poles at z = 0
        lam_scale = np.abs(np.log(np.where(mag > 0, poles, 1.0 + 0j))) / period
    else:
        period = 0.0
        rates = -poles.real
        lam_scale = np.abs(poles)
    return period, rates, lam_scale


def _modal_horizon(r: Realization, poles: NDArray[np.complex128], period: float,
                   rates: FloatArray, lam_scale: FloatArray, decades: float,
                   marginal_rtol: float, default_horizon: float,
                   notes: list[str]) -> tuple[float, float | None]:
    """Step 2: (horizon, slowest decay rate) -- the slowest stable mode settles, an
    unstable one grows by ``1/settle_fraction`` at most; marginal modes only: five periods
    of the slowest oscillation; no time scale: ``default_horizon``. Adds to ``notes``."""
    scale = max(1.0, float(lam_scale[np.isfinite(lam_scale)].max(initial=0.0)))
    tol = marginal_rtol * scale
    stable = rates[rates > tol]
    finite_stable = stable[np.isfinite(stable)]
    unstable = rates[rates < -tol]
    marginal = np.abs(rates) <= tol
    horizon: float | None = None
    slowest = float(finite_stable.min()) if finite_stable.size else None
    if slowest is not None:
        horizon = decades / slowest
    elif stable.size:  # discrete, every decaying pole at z = 0 (deadbeat): n samples
        horizon = (r.order + 1) * period
    if unstable.size:
        h_u = decades / float(-unstable.min())
        notes.append("unstable mode: horizon limited to growth by 1/settle_fraction")
        horizon = h_u if horizon is None else min(horizon, h_u)
    if horizon is None:
        osc = np.abs(poles[marginal].imag) if not r.is_discrete else np.abs(np.angle(poles[marginal])) / period
        osc = osc[osc > tol]
        if osc.size:
            horizon = 5.0 * 2.0 * math.pi / float(osc.min())
            notes.append("marginal modes only: five periods of the slowest oscillation")
        else:
            horizon = default_horizon if not r.is_discrete else max(default_horizon, (2 * r.order + 2) * period)
            notes.append(f"no decaying or growing mode: default horizon {horizon:g} s")
    return horizon, slowest


def _sample_grid(r: Realization, horizon: float, period: float, max_points: int,
                 notes: list[str]) -> tuple[float, float, int, bool]:
    """Step 3, discrete time: (horizon, step = T, samples, capped) -- at least ``2 n + 2``
    samples, at most ``max_points``."""
    capped = False
    step = period
    n_pts = int(math.ceil(horizon / period)) + 1
    n_pts = max(n_pts, 2 * r.order + 2)
    if n_pts > max_points:
        n_pts = max_points
        capped = True
        notes.append(f"capped at {max_points} samples: slowest mode not fully settled")
    horizon = (n_pts - 1) * period
    return horizon, step, n_pts, capped


def _time_grid(horizon: float, fastest: float | None, points_per_time_constant: int,
               max_points: int, notes: list[str]) -> tuple[float, float, int, bool]:
    """Step 3, continuous time: (horizon, step, points, capped) -- ``points_per_time_constant``
    per time constant of the fastest mode, widened when that needs more than
    ``max_points`` points."""
    capped = False
    if fastest is not None and fastest > 0:
        step = 1.0 / (points_per_time_constant * fastest)
    else:
        step = horizon / 100.0
    step = min(step, horizon / 10.0)
    n_pts = int(math.ceil(horizon / step)) + 1
    if n_pts > max_points:
        n_pts = max_points
        step = horizon / (max_points - 1)
        capped = True
        notes.append(
            f"capped at {max_points} points: the fastest mode is sampled more coarsely "
            "than points_per_time_constant (samples stay exact)"
        )
    horizon = (n_pts - 1) * step
    return horizon, step, n_pts, capped
