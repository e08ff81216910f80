"""Differences in the trade's units: gain in dB, phase in degrees.

The decisive evidence is a relative peak gain of ``G1 - G2``; a controls engineer also
reads "0.17 dB and 1.2 degrees at 3.1 rad/s". This module turns the two frequency
responses that the verdict already computed on its grid into those numbers, per
input/output channel:

* at the frequency where ``|G1 - G2|`` of the channel is largest: both gains in dB, the
  gain difference ``20 log10(|G2| / |G1|)`` in dB and the phase difference
  ``arg(G2 / G1)`` in degrees (wrapped to (-180, 180], so no unwrapping is involved);
* over the band where the channel matters, i.e. where both ``|G1|`` and ``|G2|`` are
  within :data:`BAND_DYNAMIC_RANGE_DB` of the larger peak gain of the two models: the
  largest gain difference in dB and the largest phase difference in degrees, each with
  its frequency.

No printing; the renderers in :mod:`audit.reports.shapes` and :mod:`audit.reports.html_page` format
the numbers.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numpy.typing import NDArray

__all__ = ["BAND_DYNAMIC_RANGE_DB", "describe_channel_difference", "describe_static_gain",
           "differences_in_trade_units"]

BAND_DYNAMIC_RANGE_DB = 60.0
"""Frequencies where either model's gain lies more than this many dB below the larger peak
gain do not enter the band figures: there a ratio of two tiny gains says nothing a
practitioner acts on (common practice, no source: 60 dB is the usual plotting range)."""

MAX_CHANNELS = 16
"""Above this many channels only the channels that differ most are reported."""


def _db(x: float) -> float | None:
    return 20.0 * math.log10(x) if x > 0.0 and math.isfinite(x) else None


def _phase_deg(ratio: complex) -> float:
    deg = math.degrees(math.atan2(ratio.imag, ratio.real))
    return 0.0 if deg == 0.0 else deg  # no "-0"


def differences_in_trade_units(
    grid: NDArray[np.float64],
    g1: NDArray[np.complex128],
    g2: NDArray[np.complex128],
    *,
    scale: float,
) -> dict[str, Any]:
    """Gain (dB) and phase (degrees) differences per channel.

    Parameters
    ----------
    grid : (k,) array
        Frequencies in rad/s.
    g1, g2 : (k, p, m) complex arrays
        The two frequency responses on ``grid``.
    scale : float, keyword-only
        The larger peak gain of the two models (the denominator of the relative
        difference); it sets the band, see :data:`BAND_DYNAMIC_RANGE_DB`.

    Returns
    -------
    dict
        ``{"band_dynamic_range_db": 60.0, "channels": [...]}``; each channel has
        ``output``, ``input``, ``at_worst`` (``frequency_rad_s``, ``gain_first_db``,
        ``gain_second_db``, ``gain_difference_db``, ``phase_difference_deg``; a gain of
        zero is ``None`` in dB and then no ratio is given) and ``over_band``
        (``max_gain_difference_db`` and ``max_phase_difference_deg`` with their
        frequencies, ``None`` when the channel never comes within the dynamic range).

    Raises
    ------
    None

    Examples
    --------
    >>> import numpy as np
    >>> w = np.array([1.0])
    >>> out = differences_in_trade_units(w, np.array([[[1.0 + 0j]]]), np.array([[[1j]]]), scale=1.0)
    >>> ch = out["channels"][0]["at_worst"]
    >>> round(ch["gain_difference_db"], 9), round(ch["phase_difference_deg"], 9)
    (0.0, 90.0)
    """
    grid = np.asarray(grid, dtype=float)
    g1 = np.asarray(g1, dtype=complex)
    g2 = np.asarray(g2, dtype=complex)
    channels: list[dict[str, Any]] = []
    if grid.size == 0 or g1.ndim != 3:
        return {"band_dynamic_range_db": BAND_DYNAMIC_RANGE_DB, "channels": channels}
    floor = scale * 10.0 ** (-BAND_DYNAMIC_RANGE_DB / 20.0) if scale > 0 else 0.0
    p, m = g1.shape[1], g1.shape[2]
    with np.errstate(all="ignore"):
        for i in range(p):
            for j in range(m):
                a, b = g1[:, i, j], g2[:, i, j]
                good = np.isfinite(a) & np.isfinite(b)
                if not np.any(good):
                    continue
                diff = np.where(good, np.abs(a - b), -1.0)
                k = int(np.argmax(diff))
                ga, gb = float(abs(a[k])), float(abs(b[k]))
                at: dict[str, Any] = {
                    "frequency_rad_s": float(grid[k]),
                    "gain_first_db": _db(ga),
                    "gain_second_db": _db(gb),
                    "gain_difference_db": None,
                    "phase_difference_deg": None,
                    "absolute_difference": float(diff[k]),
                }
                if ga > 0.0 and gb > 0.0:
                    at["gain_difference_db"] = 20.0 * math.log10(gb / ga)
                    at["phase_difference_deg"] = _phase_deg(complex(b[k] / a[k]))
                # both gains must be in range: a ratio against a near-zero gain (a zero on
                # the frequency axis) is no gain change a practitioner acts on
                band = good & (np.minimum(np.abs(a), np.abs(b)) >= floor) & (np.abs(a) > 0) & (np.abs(b) > 0)
                over: dict[str, Any] = {"max_gain_difference_db": None, "at_gain_rad_s": None,
                                        "max_phase_difference_deg": None, "at_phase_rad_s": None}
                if np.any(band):
                    idx = np.flatnonzero(band)
                    ratio = b[idx] / a[idx]
                    gdb = 20.0 * np.log10(np.abs(ratio))
                    ph = np.degrees(np.angle(ratio))
                    kg, kp = int(np.argmax(np.abs(gdb))), int(np.argmax(np.abs(ph)))
                    over = {"max_gain_difference_db": float(gdb[kg]) + 0.0,
                            "at_gain_rad_s": float(grid[idx[kg]]),
                            "max_phase_difference_deg": float(ph[kp]) + 0.0,
                            "at_phase_rad_s": float(grid[idx[kp]])}
                channels.append({"output": i, "input": j, "at_worst": at, "over_band": over})
    if len(channels) > MAX_CHANNELS:
        channels.sort(key=lambda c: -c["at_worst"]["absolute_difference"])
        channels = channels[:MAX_CHANNELS]
    return {"band_dynamic_range_db": BAND_DYNAMIC_RANGE_DB, "channels": channels}


def _fmt(x: float) -> str:
    text = f"{x:.6g}"
    return "0" if text in ("-0", "0") else text


def _matrix_text(v: Any, limit: int = 4) -> str:
    arr = np.atleast_2d(np.asarray(v, dtype=float))
    if arr.size == 1:
        return _fmt(float(arr[0, 0]))
    rows = ["[" + " ".join(_fmt(float(x)) for x in row[:limit]) + (" ..." if row.size > limit else "") + "]"
            for row in arr[:limit]]
    return "[" + " ".join(rows) + (" ..." if arr.shape[0] > limit else "") + "]"


def describe_static_gain(name: str, entry: dict[str, Any], differs: bool) -> str:
    """Plain words for a DC or high-frequency gain comparison, with both values.

    Parameters
    ----------
    name : {"dc", "high_frequency"}
    entry : dict
        ``first`` and ``second`` (gain matrices as nested lists, ``None`` when infinite:
        a pole lies at that point) as stored by the verdict's static-gain evidence.
    differs : bool
        Whether the verdict found the two gains to differ beyond the tolerance.

    Returns
    -------
    str

    Raises
    ------
    None

    Examples
    --------
    >>> describe_static_gain("dc", {"first": [[1.25]], "second": [[1.275]]}, True)
    'DC gain differs: 1.25 vs 1.275 (+0.172 dB)'
    >>> describe_static_gain("dc", {"first": None, "second": None}, False)
    'both DC gains are infinite (a pole at that point)'
    """
    label = "DC gain" if name == "dc" else "high-frequency gain"
    first, second = entry.get("first"), entry.get("second")
    if first is None and second is None:
        return f"both {label}s are infinite (a pole at that point)"
    if first is None or second is None:
        finite = _matrix_text(second if first is None else first)
        which = "first" if first is None else "second"
        return f"{label} differs: infinite in the {which} model, {finite} in the other"
    if not differs:
        arr = np.atleast_2d(np.asarray(first, dtype=float))
        return f"{label} agrees ({_matrix_text(first)})" if arr.size == 1 else f"{label}s agree"
    text = f"{label} differs: {_matrix_text(first)} vs {_matrix_text(second)}"
    a = np.atleast_2d(np.asarray(first, dtype=float))
    b = np.atleast_2d(np.asarray(second, dtype=float))
    if a.size == 1 and a[0, 0] != 0.0 and b[0, 0] != 0.0:
        db = 20.0 * math.log10(abs(b[0, 0] / a[0, 0]))
        text += f" ({db:+.3g} dB{', sign reversed' if a[0, 0] * b[0, 0] < 0 else ''})"
    return text


def describe_channel_difference(trade: Any, channel: dict[str, Any] | None = None,
                       names: dict[str, Any] | None = None) -> str:
    """One sentence on a channel's difference in dB and degrees (default: the worst channel).

    ``trade`` is the output of :func:`differences_in_trade_units` (the ``trade_units``
    entry of the frequency-grid evidence); ``channel`` picks one of its channels (default:
    the one with the largest absolute difference); ``names`` may hold ``output_names`` and
    ``input_names`` (as in a report's model entry).

    Examples
    --------
    >>> import numpy as np
    >>> t = differences_in_trade_units(np.array([0.0]), np.array([[[1.0 + 0j]]]),
    ...                                np.array([[[1.02 + 0j]]]), scale=1.0)
    >>> describe_channel_difference(t)[:40]
    '+0.172 dB and 0 deg at DC (where |G1 - G'
    """
    if not isinstance(trade, dict) or not trade.get("channels"):
        return ""
    chans = trade["channels"]
    ch = channel or max(chans, key=lambda c: c["at_worst"].get("absolute_difference", 0.0))
    at = ch["at_worst"]
    where = ""
    if len(chans) > 1:
        outs = (names or {}).get("output_names")
        ins = (names or {}).get("input_names")
        where = f"channel {_signal_text(outs, ch['output'])} <- {_signal_text(ins, ch['input'])}: "
    w = _freq_text(at.get("frequency_rad_s"))
    if at.get("gain_difference_db") is None:
        g1, g2 = at.get("gain_first_db"), at.get("gain_second_db")
        return (where + f"gain {_db_text(g1)} vs {_db_text(g2)} at {w} (one response is zero there)")
    text = (where + f"{_signed(at['gain_difference_db'], 'dB')} and "
            f"{_signed(at['phase_difference_deg'], 'deg')} at {w} "
            f"(where |G1 - G2| peaks; gain {_db_text(at.get('gain_first_db'))} vs "
            f"{_db_text(at.get('gain_second_db'))})")
    over = ch.get("over_band") or {}
    if over.get("max_gain_difference_db") is not None:
        bits = []
        for key, at_key, unit in (("max_gain_difference_db", "at_gain_rad_s", "dB"),
                                  ("max_phase_difference_deg", "at_phase_rad_s", "deg")):
            v = float(over[key])
            bits.append(f"0 {unit}" if abs(v) < TRADE_UNITS_FLOOR
                        else f"{_signed(v, unit)} (at {_freq_text(over[at_key])})")
        text += (f"; where both gains are within {trade.get('band_dynamic_range_db', 60):g} dB of "
                 "the peak gain, at most "
                 + " and ".join(bits))
    return text


TRADE_UNITS_FLOOR = 1e-9
"""dB and degree differences smaller than this are printed as 0: they correspond to a
relative difference near 1e-10, far below any tolerance, i.e. rounding (common practice,
no source)."""


def _signal_text(names: Any, index: int) -> str:
    return f"{index} ({names[index]})" if names and index < len(names) else str(index)


def _signed(x: Any, unit: str) -> str:
    v = float(x) + 0.0
    if abs(v) < TRADE_UNITS_FLOOR:
        return f"0 {unit}"
    return f"{v:+.3g} {unit}"


def _db_text(x: Any) -> str:
    return "-inf dB (zero)" if x is None else f"{float(x) + 0.0:.4g} dB"


def _freq_text(w: Any) -> str:
    if w is None:
        return "-"
    w = float(w)
    if math.isinf(w):
        return "the high-frequency limit"
    return "DC" if w == 0.0 else f"{w:.4g} rad/s"
