"""A self-contained HTML page for a compare report (offline and in the audit service).

The page opens with the verdict badge (and a distinct problem badge when an unaccepted
internal-stability problem exists), the summary, and the differences in dB and degrees;
then the models, the supplier claims (when claims were checked), six figures and the
evidence of every pair. The figures are drawn with matplotlib's Agg backend in our own
palette and embedded as base64 PNG images (``<img id="plot-...">``), so the page needs
no network:

* ``plot-bode-magnitude`` / ``plot-bode-phase`` -- the frequency responses of the models
  overlaid (Bode diagram: H. W. Bode, *Network Analysis and Feedback Amplifier Design*,
  1945), one small panel per input/output channel labelled with the signal names and
  units of the reference document (sigma_max above :data:`MAX_CHANNELS_PLOTTED`
  channels). The phase is unwrapped only across points where the gain is above the
  rounding level, so an exact zero on the frequency axis (a zero at z = -1 evaluated at
  Nyquist) does not make it jump to 0;
* ``plot-difference`` -- sigma_max(G_k - G_1) relative to the peak gain, per pair, with
  the tolerance as a line; where the difference lies below the a-posteriori
  rounding-error estimate of the two evaluations it is not drawn but shaded "below
  rounding" (no -300 dB noise);
* ``plot-step`` -- unit-step responses per channel (exact for a piecewise-constant
  input, :func:`audit.dynamics.time_responses.step_response`);
* ``plot-pole-zero`` -- poles and transmission zeros of every model; hidden modes ringed,
  unstable hidden modes ringed in red and labelled, the unstable region tinted;
* ``plot-markov`` -- the term-by-term relative difference of the frequency-scaled Markov
  parameters ``D, CB, CAB, ...`` of every pair, with the tolerance, read from the
  report's ``markov_parameters`` evidence.

Clicking a figure opens it at its stored resolution (1.5x the page width) in an overlay;
the few lines of inline script that do it need no network and no library. Where a
Content-Security-Policy forbids scripts (the audit service sends one), the page is the
same without the enlarged view.

No numerical method of its own is implemented here: responses, error estimates, zeros,
step responses and the frequency grid come from :mod:`audit.evidence.frequency`,
:mod:`audit.verdict.compare`, :mod:`audit.structure.zeros` and :mod:`audit.dynamics.time_responses`. Every string
that came from a user (model names, sources, claims) is HTML-escaped. Figures are built
with the object-oriented :class:`matplotlib.figure.Figure` API, never ``pyplot``, so that
rendering is safe from several threads of the service at once.
"""

from __future__ import annotations

import base64
import html
import io
import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from numpy.typing import NDArray

from audit.errors import AuditError, InvalidModelError, NumericalTroubleError
from audit.core.realization import Realization, same_time_domain

__all__ = ["MAX_CHANNELS_PLOTTED", "PLOT_IDS", "render_compare_html"]

MAX_CHANNELS_PLOTTED = 16
"""At most this many (output, input) channels get their own small panel; for larger
models the largest singular value sigma_max(G) is drawn instead (no phase)."""

PLOT_IDS = ("plot-bode-magnitude", "plot-bode-phase", "plot-difference", "plot-step",
            "plot-pole-zero", "plot-markov")
"""The ids of the embedded figures, in page order."""

_POINTS_PER_DECADE = 40
_STEP_POINTS = 600
_PHASE_GAIN_FLOOR = 1e-9
"""The phase is not drawn where |G| is below this fraction of the channel's peak gain: an
exactly evaluated zero has no phase (its angle is rounding noise)."""

# our own palette: deep teal, burnt orange, indigo, olive, raspberry, slate
_PALETTE = ("#0f6b5f", "#c0622b", "#5b4a9b", "#8a7b12", "#a23b6b", "#2f4858")
_INK = "#23262b"
_GRID = "#ddd6c8"
_PAPER = "#fbfaf6"
_ALARM = "#c1121f"
_AMBER = "#d08800"
_FIG_WIDTH = 12.0  # inches: shown 1200 px wide on the page
_DPI = 150  # 1800 px stored: the zoomed view (click a figure) shows 1.5x the detail

_CSS = """
:root{--ink:#23262b;--muted:#5d6470;--rule:#ddd6c8;--paper:#fbfaf6;--teal:#0f6b5f;
--alarm:#c1121f;--amber:#b26a00}
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,sans-serif;margin:0;color:var(--ink);
line-height:1.45;background:#fff}
main{max-width:1240px;margin:0 auto;padding:1.2em 1.5em 3em}
header.top{background:var(--paper);border-bottom:3px solid var(--teal);padding:1em 1.5em}
header.top div{max-width:1240px;margin:0 auto}
h1{font-size:1.45em;margin:.2em 0 .4em}
h2{font-size:1.15em;margin-top:1.8em;padding-bottom:.2em;border-bottom:1px solid var(--rule)}
h3{font-size:1.02em;margin-top:1.4em}
table{border-collapse:collapse;margin:.5em 0;font-size:.9em}
th,td{border:1px solid var(--rule);padding:.3em .55em;text-align:left;vertical-align:top}
th{background:var(--paper);font-weight:600}
td.num{white-space:nowrap;font-variant-numeric:tabular-nums;text-align:right}
.verdict{display:inline-block;padding:.3em .9em;border-radius:3px;font-weight:700;
color:#fff;text-transform:uppercase;letter-spacing:.06em;font-size:.95em}
.v-equivalent,.o-pass,.o-holds{background:#1d7a4a}
.v-different,.o-fail,.o-fails{background:var(--alarm)}
.v-inconclusive,.o-unclear,.o-not_checkable{background:var(--amber)}
.v-not_compared,.o-info,.o-skipped,.o-not_computed{background:#6b7280}
.v-problem{background:repeating-linear-gradient(135deg,#5a0b12 0 10px,#7d1420 10px 20px);
margin-left:.6em}
td.o{color:#fff;font-weight:700;text-align:center;white-space:nowrap}
ul.trade{margin:.3em 0 .8em 1.2em;padding:0}
ul.trade li{margin:.15em 0}
figure{margin:1em 0 1.6em}
figcaption{font-size:.88em;color:var(--muted);max-width:1100px}
img.plot{width:100%;max-width:1200px;height:auto;border:1px solid var(--rule);background:#fff}
.caution{margin-top:2em;padding:.8em 1em;border-left:4px solid var(--amber);background:#fff8e6}
.warn{border-left:4px solid var(--alarm);padding:.3em .8em;background:#fdf0f0}
code{font-size:.95em}
body.zoomable img.plot{cursor:zoom-in}
#zoom{position:fixed;inset:0;background:rgba(20,22,26,.88);overflow:auto;display:none;
z-index:10;cursor:zoom-out}
#zoom img{display:block;margin:1.5em auto;max-width:none;background:#fff}
#zoom p{color:#eee;text-align:center;font-size:.9em;margin:.8em}
"""

# A few lines of inline script, no network: click a figure to see it at its stored
# resolution in an overlay (scroll to pan), click again or press Escape to close.
_ZOOM_SCRIPT = """
(function(){var z=document.getElementById('zoom'),im=z.querySelector('img');
document.body.classList.add('zoomable');
document.addEventListener('click',function(e){var t=e.target;
if(t.classList&&t.classList.contains('plot')){im.src=t.src;im.alt=t.alt;z.style.display='block';
z.scrollTop=0;z.scrollLeft=0;e.preventDefault();}else if(z.contains(t)){z.style.display='none';}});
document.addEventListener('keydown',function(e){if(e.key==='Escape'){z.style.display='none';}});})();
"""


def zoom_script_csp_source() -> str:
    """The Content-Security-Policy source that lets exactly this page's zoom script run
    (its SHA-256 hash, CSP Level 2); any other inline or injected script stays blocked."""
    import base64
    import hashlib

    digest = hashlib.sha256(_ZOOM_SCRIPT.encode("utf-8")).digest()
    return "'sha256-" + base64.b64encode(digest).decode("ascii") + "'"


# --------------------------------------------------------------------- helpers
def _e(value: Any) -> str:
    from audit.reports.safe_output import xml_text  # no control characters or escape sequences

    return html.escape(xml_text(str(value)), quote=True)


def _num(value: Any) -> str:
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return f"{value + 0.0:.4g}"
    return str(value)


def _colour(k: int) -> str:
    return _PALETTE[k % len(_PALETTE)]


def _png(fig: Any) -> str:
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    from audit.reports.safe_output import plain_plot_labels

    FigureCanvasAgg(fig)
    plain_plot_labels(fig)  # names are plain text, never math for the plotting library
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI, facecolor="white")
    return base64.b64encode(buf.getvalue()).decode("ascii")


def _img(plot_id: str, fig: Any, alt: str, caption: str) -> str:
    return (
        f'<figure><img class="plot" id="{plot_id}" alt="{_e(alt)}" '
        f'src="data:image/png;base64,{_png(fig)}"><figcaption>{_e(caption)}</figcaption>'
        "</figure>"
    )


def _new_figure(width: float = _FIG_WIDTH, height: float = 4.0) -> Any:
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height))
    return fig


def _margins(fig: Any, *, top: float, bottom: float = 0.6, left: float = 0.95,
             right: float = 0.25, hspace: float = 0.75, wspace: float = 0.8,
             rows: int = 1, cols: int = 1) -> None:
    """Fixed margins in inches (a measured layout engine costs seconds per figure)."""
    w, h = fig.get_figwidth(), fig.get_figheight()
    panel_w = max((w - left - right - wspace * (cols - 1)) / cols, 0.1)
    panel_h = max((h - top - bottom - hspace * (rows - 1)) / rows, 0.1)
    fig.subplots_adjust(left=left / w, right=1 - right / w, bottom=bottom / h, top=1 - top / h,
                        wspace=wspace / panel_w, hspace=hspace / panel_h)


def _style(ax: Any) -> None:
    ax.set_facecolor(_PAPER)
    ax.grid(True, which="major", color=_GRID, linewidth=0.8)
    ax.grid(True, which="minor", color=_GRID, linewidth=0.4, alpha=0.6)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color("#8a8f98")
    ax.tick_params(labelsize=9, colors=_INK)


def _plain(text: str) -> str:
    """A user's name for a figure label; :func:`_png` turns off math-text parsing of every
    label (audit.reports.safe_output.plain_plot_labels), so ``$`` needs no escaping here."""
    return str(text)


def _plot_grid(models: Sequence[Realization]) -> NDArray[np.float64]:
    from audit.evidence.frequency_grid import adaptive_frequency_grid

    w = adaptive_frequency_grid(list(models), points_per_decade=_POINTS_PER_DECADE)
    w = w[w > 0]
    if w.size == 0:  # static gains only
        w = np.logspace(-2, 2, 50)
        if models[0].sample_period is not None:
            w = w[w <= math.pi / models[0].sample_period]
    return w


def _responses(r: Realization, w: NDArray[np.float64]) -> NDArray[np.complex128]:
    """(k, p, m) frequency response; NaN where a frequency hits a boundary pole."""
    from audit.evidence.frequency import frequency_response

    try:
        return np.asarray(frequency_response(r, w), dtype=complex)
    except NumericalTroubleError:
        out = np.full((w.size, r.n_outputs, r.n_inputs), np.nan + 0j)
        for k, wk in enumerate(w):
            try:
                out[k] = frequency_response(r, [wk])[0]
            except NumericalTroubleError:
                pass
        return out


def _responses_with_estimate(r: Realization, w: NDArray[np.float64]
                             ) -> tuple[NDArray[np.complex128], NDArray[np.float64]]:
    """Response and a-posteriori rounding-error estimate (NaN where a pole is hit)."""
    from audit.evidence.contour import frequency_to_point
    from audit.verdict.compare import evaluate_with_error_estimate

    pts = frequency_to_point(w, r)
    try:
        g, est = evaluate_with_error_estimate(r, pts)
        return np.asarray(g, dtype=complex), np.asarray(est, dtype=float)
    except NumericalTroubleError:
        g = np.full((w.size, r.n_outputs, r.n_inputs), np.nan + 0j)
        est = np.full(w.size, np.nan)
        for k in range(w.size):
            try:
                gk, ek = evaluate_with_error_estimate(r, pts[k:k + 1])
                g[k], est[k] = gk[0], ek[0]
            except NumericalTroubleError:
                pass
        return g, est


def _channels(models: Sequence[Realization]) -> list[tuple[int, int]] | None:
    p, m = models[0].n_outputs, models[0].n_inputs
    if p * m > MAX_CHANNELS_PLOTTED:
        return None
    return [(i, j) for i in range(p) for j in range(m)]


def _sigma_max(g: NDArray[np.complex128]) -> NDArray[np.float64]:
    good = np.all(np.isfinite(g), axis=(1, 2))
    out = np.full(g.shape[0], np.nan)
    if np.any(good):
        out[good] = np.linalg.svd(g[good], compute_uv=False)[:, 0]
    return out


def _to_db(x: NDArray[np.float64]) -> NDArray[np.float64]:
    with np.errstate(divide="ignore", invalid="ignore"):
        return 20.0 * np.log10(np.where(x > 0, x, np.nan))


def _unwrapped_phase(g: NDArray[np.complex128]) -> NDArray[np.float64]:
    """Phase in degrees, unwrapped across the points where it is defined.

    Points where the response is not finite or its magnitude is below
    :data:`_PHASE_GAIN_FLOOR` of the channel's peak are left out (NaN) and the unwrapping
    bridges them, so a zero evaluated exactly (its angle is rounding noise) causes no
    jump.
    """
    mag = np.abs(g)
    finite = np.isfinite(g)
    peak = float(np.max(mag[finite])) if np.any(finite) else 0.0
    keep = finite & (mag > _PHASE_GAIN_FLOOR * peak)
    out = np.full(g.shape, np.nan)
    idx = np.flatnonzero(keep)
    if idx.size:
        out[idx] = np.degrees(np.unwrap(np.angle(g[idx])))
    return out


def _align_phase(phase: NDArray[np.float64], reference: NDArray[np.float64] | None) -> NDArray[np.float64]:
    """Shift by a multiple of 360 deg: near the reference curve, or into (-180, 180] at its start."""
    idx = np.flatnonzero(np.isfinite(phase))
    if idx.size == 0:
        return phase
    if reference is not None:
        common = np.flatnonzero(np.isfinite(phase) & np.isfinite(reference))
        if common.size:
            k = common[0]
            return phase - 360.0 * round((phase[k] - reference[k]) / 360.0)
    return phase - 360.0 * round(phase[idx[0]] / 360.0)


def _signal_names(data: Mapping[str, Any], key: str, count: int, prefix: str) -> list[str]:
    models = data.get("models") or [{}]
    names = models[0].get(key) if isinstance(models[0], Mapping) else None
    if names and len(names) == count:
        return [str(n) for n in names]
    return [f"{prefix} {k}" for k in range(count)]


def _channel_title(data: Mapping[str, Any], i: int, j: int, p: int, m: int) -> str:
    outs = _signal_names(data, "output_names", p, "output")
    ins = _signal_names(data, "input_names", m, "input")
    return f"{_plain(outs[i])}  \u2190  {_plain(ins[j])}"


def _label(r: Realization, k: int, limit: int = 60) -> str:
    text = _plain(r.name or f"model {k + 1}")
    return text if len(text) <= limit else text[:limit - 1] + "\u2026"


def _panel_grid(fig: Any, p: int, m: int, sharex: bool = True) -> list[list[Any]]:
    axes = fig.subplots(p, m, squeeze=False, sharex=sharex)
    return [[axes[i][j] for j in range(m)] for i in range(p)]


def _shared_legend(fig: Any, handles: list[Any], labels: list[str]) -> None:
    if handles:
        fig.legend(handles, labels, loc="upper center", bbox_to_anchor=(0.5, 1.0),
                   ncol=min(3, len(labels)), fontsize=10, frameon=False)


def _nyquist(models: Sequence[Realization]) -> float | None:
    t = models[0].sample_period
    return None if t is None else math.pi / t


def _bode_figures(models: Sequence[Realization], data: Mapping[str, Any]) -> tuple[str, str]:
    w = _plot_grid(models)
    resp = [_responses(r, w) for r in models]
    chans = _channels(models)
    p, m = models[0].n_outputs, models[0].n_inputs
    rows, cols = (p, m) if chans is not None else (1, 1)
    panel_h = 2.9 if rows > 1 else 4.2
    mag_fig = _new_figure(_FIG_WIDTH, 0.7 + panel_h * rows)
    phase_fig = _new_figure(_FIG_WIDTH, 0.7 + panel_h * rows)
    mag_axes = _panel_grid(mag_fig, rows, cols)
    ph_axes = _panel_grid(phase_fig, rows, cols)
    styles = ["-", (0, (6, 3)), (0, (2, 2)), (0, (6, 2, 1, 2))]
    nyq = _nyquist(models)
    handles: list[Any] = []
    labels: list[str] = []
    for k, (r, g) in enumerate(zip(models, resp)):
        style = dict(color=_colour(k), linestyle=styles[k % len(styles)], linewidth=2.0 if k == 0 else 1.6)
        if chans is None:
            (line,) = mag_axes[0][0].semilogx(w, _to_db(_sigma_max(g)), **style)
            handles.append(line)
            labels.append(_label(r, k) + " (largest singular value)")
            continue
        for i, j in chans:
            (line,) = mag_axes[i][j].semilogx(w, _to_db(np.abs(g[:, i, j])), **style)
            ph = _unwrapped_phase(g[:, i, j])
            ref_ph = _unwrapped_phase(resp[0][:, i, j]) if k else None
            ph = _align_phase(ph, _align_phase(ref_ph, None) if ref_ph is not None else None)
            ph_axes[i][j].semilogx(w, ph, **style)
        handles.append(line)
        labels.append(_label(r, k))
    for grid_axes, ylabel in ((mag_axes, "gain [dB]"), (ph_axes, "phase [deg]")):
        for i in range(rows):
            for j in range(cols):
                ax = grid_axes[i][j]
                _style(ax)
                if nyq is not None:
                    ax.axvline(nyq, color=_INK, linewidth=0.9, alpha=0.5, linestyle=(0, (1, 2)))
                if chans is not None and (rows > 1 or cols > 1):
                    ax.set_title(_channel_title(data, i, j, p, m), fontsize=10)
                if j == 0:
                    ax.set_ylabel(ylabel, fontsize=10)
                if i == rows - 1:
                    ax.set_xlabel("frequency [rad/s]", fontsize=10)
    if chans is None:
        ax = ph_axes[0][0]
        ax.text(0.5, 0.5, f"phase not drawn: more than {MAX_CHANNELS_PLOTTED} channels",
                ha="center", va="center", transform=ax.transAxes, fontsize=11)
    elif rows == 1 and cols == 1:
        title = _channel_title(data, 0, 0, p, m)
        mag_axes[0][0].set_title(f"Gain, {title}", fontsize=11)
        ph_axes[0][0].set_title(f"Phase, {title}", fontsize=11)
    _shared_legend(mag_fig, handles, labels)
    _shared_legend(phase_fig, handles, labels)
    for fig in (mag_fig, phase_fig):
        _margins(fig, top=0.8, rows=rows, cols=cols)
    caption = (f"{w.size} frequencies from {w[0]:.3g} to {w[-1]:.3g} rad/s"
               + ("" if nyq is None else f"; dotted vertical line: Nyquist frequency {nyq:.4g} rad/s")
               + ("" if chans is None or p * m == 1 else "; one panel per channel, output \u2190 input")
               + ". Phase is left out where the gain is below 1e-9 of the channel's peak "
               "(an exact zero has no phase).")
    return (
        _img("plot-bode-magnitude", mag_fig, "Bode gain of the models, per channel", caption),
        _img("plot-bode-phase", phase_fig, "Bode phase of the models, per channel", caption),
    )


def _pair_scale(pair: Mapping[str, Any]) -> float | None:
    ev = next((e for e in pair.get("evidence", []) if e.get("decisive")), None)
    if not ev:
        return None
    value = (ev.get("details") or {}).get("reference_peak_gain")
    try:
        v = float(value)
    except (TypeError, ValueError):
        return None
    return v if v > 0 and math.isfinite(v) else None


def _difference_curves(models: Sequence[Realization], data: Mapping[str, Any],
                       w: NDArray[np.float64]) -> list[tuple[NDArray[np.float64], NDArray[np.float64]]]:
    """Per model k >= 1: sigma_max(G_k - G_1) / peak gain and its rounding-error estimate
    (same scale), on ``w``."""
    base, base_err = _responses_with_estimate(models[0], w)
    pairs = list(data.get("comparisons") or [])
    out = []
    for k in range(1, len(models)):
        g, err = _responses_with_estimate(models[k], w)
        pair = pairs[k - 1] if k - 1 < len(pairs) else {}
        scale = _pair_scale(pair) or float(np.nanmax(np.concatenate(
            [_sigma_max(base), _sigma_max(g), [0.0]])))
        if not scale > 0:
            scale = 1.0
        out.append((_sigma_max(g - base) / scale, (base_err + err) / scale))
    return out


def _difference_figure(models: Sequence[Realization], data: Mapping[str, Any]) -> str:
    w = _plot_grid(models)
    fig = _new_figure(_FIG_WIDTH, 4.4)
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    tol = (data.get("tolerances") or {}).get("rtol")
    lows: list[float] = []
    highs: list[float] = [1.0]
    floors: list[NDArray[np.float64]] = []
    for k, (rel, floor) in enumerate(_difference_curves(models, data, w), start=1):
        above = np.where(rel > floor, rel, np.nan)
        floors.append(floor)
        label = f"{_label(models[k], k)}  vs  reference"
        if np.any(np.isfinite(above)):
            ax.loglog(w, above, color=_colour(k), linewidth=1.8, label=label)
            highs.append(float(np.nanmax(above)))
            lows.append(float(np.nanmin(above)))
        else:
            ax.plot([], [], color=_colour(k), linewidth=1.8,
                    label=label + ": below rounding everywhere")
    ax.set_xscale("log")
    ax.set_yscale("log")
    if floors:
        fl = np.nanmax(np.vstack(floors), axis=0)
        fl = np.where(np.isfinite(fl) & (fl > 0), fl, np.nan)
        if np.any(np.isfinite(fl)):
            lows.append(float(np.nanmin(fl)))
            bottom = max(min(lows) / 10.0, 1e-18)
            ax.fill_between(w, bottom, np.where(np.isfinite(fl), fl, bottom), color="#d9d4ca",
                            alpha=0.8, linewidth=0, label="below rounding (error estimate)")
            ax.text(float(w[0] * (w[-1] / w[0]) ** 0.15), float(np.sqrt(bottom * np.nanmax(fl))),
                    "below rounding", fontsize=11, color="#6b6458", ha="center", va="center")
    if tol is not None:
        t = float(tol)
        ax.axhline(t, color=_ALARM, linestyle=(0, (6, 3)), linewidth=1.4, label=f"tolerance {t:.1e}")
        lows.append(t)
        highs.append(t)
    if lows:
        ax.set_ylim(max(min(lows) / 10.0, 1e-18), max(highs) * 3.0)
    if len(models) < 2:
        ax.text(0.5, 0.5, "one model: no difference to draw", ha="center", va="center",
                transform=ax.transAxes, fontsize=11)
    nyq = _nyquist(models)
    if nyq is not None:
        ax.axvline(nyq, color=_INK, linewidth=0.9, alpha=0.5, linestyle=(0, (1, 2)))
    ax.set_xlabel("frequency [rad/s]", fontsize=10)
    ax.set_ylabel("\u03c3max(G\u2096 \u2212 G\u2081) / peak gain", fontsize=10)
    handles, labels = ax.get_legend_handles_labels()
    fig.legend(handles, labels, loc="upper center", bbox_to_anchor=(0.5, 1.0), ncol=2,
               fontsize=10, frameon=False)
    rows = (len(labels) + 1) // 2
    _margins(fig, top=0.35 + 0.25 * rows)
    caption = ("Largest singular value of the difference of every model to the first, divided "
               "by the larger peak gain of the pair (the decisive metric, evaluated here on the "
               "plotting grid). Where it lies below the estimated rounding error of the two "
               "evaluations (primal and dual Hessenberg routes) it is not drawn: the shaded "
               "area is \u201cbelow rounding\u201d.")
    return _img("plot-difference", fig, "relative difference to the reference with tolerance", caption)


def _step_figure(models: Sequence[Realization], data: Mapping[str, Any]) -> str:
    from audit.dynamics.time_responses import response_horizon, step_response

    p, m = models[0].n_outputs, models[0].n_inputs
    chans = _channels(models)
    rows, cols = (p, m) if chans is not None else (1, 1)
    fig = _new_figure(_FIG_WIDTH, 0.7 + (2.6 if rows > 1 else 3.8) * rows)
    axes = _panel_grid(fig, rows, cols)
    horizon = max(response_horizon(r, max_points=2000).horizon for r in models)
    period = models[0].sample_period
    if period is None:
        times = np.linspace(0.0, horizon, _STEP_POINTS)
    else:
        count = int(min(max(horizon / period, 8), 1000))
        times = np.arange(count + 1) * period
    handles: list[Any] = []
    labels: list[str] = []
    notes: list[str] = []
    for k, r in enumerate(models):
        try:
            y = step_response(r, times).outputs
        except NumericalTroubleError as exc:
            notes.append(f"step response of {r.name or k + 1} not drawn ({exc})")
            continue
        style = dict(color=_colour(k), linewidth=2.0 if k == 0 else 1.5,
                     linestyle="-" if k == 0 else (0, (6, 3)),
                     drawstyle="steps-post" if period is not None else "default")
        if chans is None:
            (line,) = axes[0][0].plot(times, np.linalg.norm(y, axis=(1, 2)), **style)
        else:
            for i, j in chans:
                (line,) = axes[i][j].plot(times, y[:, i, j], **style)
        handles.append(line)
        labels.append(_label(r, k))
    outs = _signal_names(data, "output_names", p, "output")
    for i in range(rows):
        for j in range(cols):
            ax = axes[i][j]
            _style(ax)
            if chans is not None and (rows > 1 or cols > 1):
                ax.set_title(_channel_title(data, i, j, p, m), fontsize=10)
            if j == 0:
                ax.set_ylabel("output" if chans is None else _plain(outs[i]), fontsize=10)
            if i == rows - 1:
                ax.set_xlabel("time [s]", fontsize=10)
    if chans is None:
        axes[0][0].set_title("Step responses: Frobenius norm of the outputs over all inputs", fontsize=11)
    elif rows == 1 and cols == 1:
        axes[0][0].set_title(f"Unit-step response, {_channel_title(data, 0, 0, p, m)}", fontsize=11)
    _shared_legend(fig, handles, labels)
    _margins(fig, top=0.8, rows=rows, cols=cols)
    caption = (f"Response to a unit step on each input from rest, over {times[-1]:.4g} s "
               "(exact for a piecewise-constant input"
               + ("" if period is None else f", samples every {period:g} s") + ").")
    if notes:
        caption += " " + "; ".join(notes)
    return _img("plot-step", fig, "step responses of the models", caption)


def _hidden_modes(data: Mapping[str, Any]) -> dict[str, list[dict[str, Any]]]:
    """Hidden modes per model name: the report's ``problems`` when present, else the
    per-model minimal-order evidence of every pair."""
    out: dict[str, list[dict[str, Any]]] = {}
    seen: set[tuple[str, float, float]] = set()

    def add(model: str, loc: Any, unstable: bool, accepted: bool, kind: str) -> None:
        try:
            re_, im = float(loc[0]), float(loc[1])
        except (TypeError, ValueError, IndexError):
            return
        key = (model, round(re_, 12), round(im, 12))
        if key in seen:
            for h in out.get(model, []):
                if (round(h["re"], 12), round(h["im"], 12)) == key[1:]:
                    h["unstable"] = h["unstable"] or unstable
                    h["accepted"] = h["accepted"] and accepted
            return
        seen.add(key)
        out.setdefault(model, []).append({"re": re_, "im": im, "unstable": unstable,
                                          "accepted": accepted, "kind": kind})

    for prob in data.get("problems") or []:
        if not isinstance(prob, Mapping):
            continue
        kind = str(prob.get("kind", ""))
        add(str(prob.get("model", "")), prob.get("location"), kind.startswith("unstable"),
            bool(prob.get("accepted", False)), kind)
    for pair in data.get("comparisons") or []:
        for ev in pair.get("evidence", []):
            key = str(ev.get("key", ""))
            if not key.startswith("minimal_order:"):
                continue
            model = key.split(":", 1)[1]
            for h in (ev.get("details") or {}).get("hidden_modes", []) or []:
                add(model, h.get("location"), bool(h.get("unstable")), False, str(h.get("kind", "")))
    return out


def _unaccepted_problems(data: Mapping[str, Any]) -> list[str]:
    """Messages of internal-stability problems nobody accepted (the badge's problem state)."""
    problems = data.get("problems")
    if isinstance(problems, list):
        return [str(p.get("message") or p.get("kind") or "problem") for p in problems
                if isinstance(p, Mapping) and not p.get("accepted", False)]
    out: list[str] = []
    for pair in data.get("comparisons") or []:
        for w in pair.get("warnings", []) or []:
            if str(w).startswith("UNSTABLE") and w not in out:
                out.append(str(w))
    return out


def _pole_zero_figure(models: Sequence[Realization], data: Mapping[str, Any]) -> str:
    from matplotlib.patches import Circle, Rectangle

    from audit.structure.zeros import transmission_zeros

    fig = _new_figure(_FIG_WIDTH, 6.0)
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    notes: list[str] = []
    markers_p = ["x", "+", "1", "2", "3", "4"]
    hidden = _hidden_modes(data)
    discrete = models[0].sample_period is not None
    points: list[complex] = []
    ringed = {"hidden": False, "marginal": False, "unstable": False}
    for k, r in enumerate(models):
        label = _label(r, k)
        poles = r.poles()
        try:
            zeros = transmission_zeros(r)
        except (NumericalTroubleError, InvalidModelError) as exc:
            zeros = np.zeros(0, dtype=complex)
            notes.append(f"zeros of {r.name or k + 1} not drawn ({exc})")
        points += list(poles) + list(zeros)
        if poles.size:
            ax.scatter(poles.real, poles.imag, marker=markers_p[k % len(markers_p)], s=80,
                       linewidths=2.0, color=_colour(k), label=f"poles: {label}", zorder=3)
        if zeros.size:
            ax.scatter(zeros.real, zeros.imag, marker="o", s=70, facecolors="none", linewidths=1.6,
                       edgecolors=_colour(k), label=f"zeros: {label}", zorder=3)
        for h in hidden.get(r.name, []):
            points.append(complex(h["re"], h["im"]))  # keep every ringed mode in view
            bad = h["unstable"] and not h["accepted"]
            marginal = not bad and h["kind"].startswith("marginal") and not h["accepted"]
            ringed["unstable" if bad else "marginal" if marginal else "hidden"] = True
            edge = _ALARM if bad else _AMBER if marginal else "#7a7266"
            ax.scatter([h["re"]], [h["im"]], marker="o", s=420 if bad else 300, facecolors="none",
                       edgecolors=edge, linewidths=2.6 if bad or marginal else 1.6, zorder=4)
            if bad:
                ax.annotate("UNSTABLE hidden mode", (h["re"], h["im"]), xytext=(14, 14),
                            textcoords="offset points", color=_ALARM, fontsize=10,
                            fontweight="bold")
    # legend entries for the rings, drawn once
    if ringed["hidden"]:
        ax.scatter([], [], marker="o", s=300, facecolors="none", edgecolors="#7a7266",
                   linewidths=1.6, label="hidden mode (ringed)")
    if ringed["marginal"]:
        ax.scatter([], [], marker="o", s=300, facecolors="none", edgecolors=_AMBER,
                   linewidths=2.6, label="marginal hidden mode (amber ring)")
    if ringed["unstable"]:
        ax.scatter([], [], marker="o", s=420, facecolors="none", edgecolors=_ALARM,
                   linewidths=2.6, label="unstable hidden mode (red ring)")
    finite = [z for z in points if np.isfinite(z)]
    span = max([abs(z) for z in finite] + [1.0 if discrete else 1e-3])
    if discrete:
        t = np.linspace(0, 2 * math.pi, 361)
        ax.plot(np.cos(t), np.sin(t), color=_INK, linewidth=0.9, alpha=0.6)
        ax.set_aspect("equal", adjustable="box")
        ax.set_xlabel("Re z", fontsize=10)
        ax.set_ylabel("Im z", fontsize=10)
        lim = max(1.15, 1.1 * span)
        ax.add_patch(Rectangle((-lim * 3, -lim * 3), 6 * lim, 6 * lim, color="#f6dede", zorder=0))
        ax.add_patch(Circle((0, 0), 1.0, color=_PAPER, zorder=0.5))
        ax.set_xlim(-lim, lim)
        ax.set_ylim(-lim, lim)
        region = "outside the unit circle (tinted): unstable"
    else:
        ax.axvline(0.0, color=_INK, linewidth=0.9, alpha=0.6)
        ax.axvspan(0.0, 1e300, color="#f6dede", zorder=0)
        ax.set_xlabel("Re s [rad/s]", fontsize=10)
        ax.set_ylabel("Im s [rad/s]", fontsize=10)
        re_max = max([z.real for z in finite] + [0.0])
        re_min = min([z.real for z in finite] + [0.0])
        pad = 0.08 * max(re_max - re_min, 1e-3)
        ax.set_xlim(re_min - pad, max(re_max, 0.0) + max(pad, 0.05 * span))
        if all(abs(z.imag) <= 1e-12 * max(abs(z), 1.0) for z in finite):  # all on the real axis
            half = 0.3 * (re_max - re_min + 2 * pad)
            ax.set_ylim(-half, half)
        region = "right half-plane (tinted): unstable"
    ax.axhline(0.0, color=_INK, linewidth=0.6, alpha=0.4)
    ax.set_title("Pole-zero map: poles as crosses (one style per model), transmission zeros "
                 "\u25cb, hidden modes ringed", fontsize=11)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=9.5, loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)
    _margins(fig, top=0.45, right=4.3)
    caption = (f"Poles include hidden (uncontrollable or unobservable) modes; {region}. "
               "Hidden modes come from each model's staircase decomposition"
               + (" and the report's problem list" if data.get("problems") else "") + ".")
    if notes:
        caption += " " + "; ".join(notes)
    return _img("plot-pole-zero", fig, "pole-zero map", caption)


def _markov_figure(data: Mapping[str, Any]) -> str:
    fig = _new_figure(_FIG_WIDTH, 4.6)
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    drawn = 0
    tolerance = None
    floor = 1e-18
    below_any = False
    for k, pair in enumerate(data.get("comparisons", [])):
        ev = next((e for e in pair.get("evidence", []) if e.get("key") == "markov_parameters"), None)
        if not ev or ev.get("outcome") == "skipped":
            continue
        det = ev.get("details", {})
        rel = np.asarray(det.get("relative_differences", []), dtype=float)
        err = np.asarray(det.get("error_estimates", [0.0] * rel.size), dtype=float)
        if rel.size == 0:
            continue
        tolerance = det.get("tolerance", ev.get("tolerance"))
        idx = np.arange(rel.size)
        colour = _colour(k + 1)
        ax.semilogy(idx, np.maximum(rel, floor), color=colour, linewidth=1.4, alpha=0.8,
                    label=f"{_plain(pair.get('other'))} vs reference")
        below = err >= rel if err.size == rel.size else np.zeros(rel.size, dtype=bool)
        ax.scatter(idx[~below], np.maximum(rel[~below], floor), color=colour, s=36, zorder=3)
        if np.any(below):
            ax.scatter(idx[below], np.maximum(rel[below], floor), facecolors="white",
                       edgecolors=colour, s=36, zorder=3)
            below_any = True
        drawn += 1
    if tolerance is not None:
        ax.axhline(float(tolerance), color=_ALARM, linestyle=(0, (6, 3)), linewidth=1.4,
                   label=f"tolerance {float(tolerance):.1e}")
    if below_any:
        ax.scatter([], [], facecolors="white", edgecolors="#6b6458", s=36,
                   label="open marker: below rounding (error estimate)")
    if drawn == 0:
        ax.text(0.5, 0.5, "no Markov parameter comparison in this report", ha="center",
                va="center", transform=ax.transAxes, fontsize=11)
    else:
        handles, labels = ax.get_legend_handles_labels()
        fig.legend(handles, labels, loc="upper center", bbox_to_anchor=(0.5, 1.0), ncol=2,
                   fontsize=10, frameon=False)
    from matplotlib.ticker import MaxNLocator

    ax.xaxis.set_major_locator(MaxNLocator(integer=True))  # terms are whole numbers
    ax.set_xlabel("term k (0: D, 1: CB, 2: CAB, ...)", fontsize=10)
    ax.set_ylabel("relative difference", fontsize=10)
    rows = (len(ax.get_legend_handles_labels()[1]) + 1) // 2
    _margins(fig, top=0.35 + 0.25 * rows)
    return _img("plot-markov", fig, "Markov parameter comparison",
                "Differences are relative to the largest term of either model, on a "
                "frequency-scaled copy of both (values below 1e-18 drawn at 1e-18). Open "
                "markers: the difference is below its rounding-error estimate.")


def _evidence_table(pair: Mapping[str, Any]) -> str:
    from audit.reports.shapes import evidence_value_text

    rows = []
    for ev in pair.get("evidence", []):
        outcome = str(ev.get("outcome", ""))
        rows.append(
            "<tr>"
            f"<td>{_e(ev.get('title', ''))}{' <b>(decisive)</b>' if ev.get('decisive') else ''}</td>"
            f'<td class="num">{_e(evidence_value_text(ev))}</td>'
            f'<td class="num">{_e(_num(ev.get("tolerance")))}</td>'
            f'<td class="o o-{_e(outcome)}">{_e(outcome)}</td>'
            f"<td>{_e(ev.get('summary', ''))}</td></tr>"
        )
    return ("<table><tr><th>evidence</th><th>value</th><th>tolerance</th><th>outcome</th>"
            "<th>summary</th></tr>" + "".join(rows) + "</table>")


def _claims_table(claims: Sequence[Mapping[str, Any]]) -> str:
    rows = []
    for c in claims:
        outcome = str(c.get("outcome", ""))
        rows.append(
            "<tr>"
            f"<td>{_e(c.get('model', ''))}</td><td>{_e(c.get('claim', ''))}</td>"
            f"<td>{_e(_fmt_value(c.get('claimed')))}</td>"
            f"<td>{_e(_fmt_value(c.get('measured')))}</td>"
            f'<td class="num">{_e(_num(c.get("tolerance")))}</td>'
            f'<td class="o o-{_e(outcome)}">{_e(outcome)}</td>'
            f"<td>{_e(c.get('message', ''))}</td></tr>"
        )
    return ("<table><tr><th>model</th><th>claim</th><th>claimed</th><th>measured</th>"
            "<th>tolerance</th><th>outcome</th><th>message</th></tr>" + "".join(rows)
            + "</table>")


def _fmt_value(v: Any) -> str:
    if isinstance(v, float):
        return f"{v:.6g}"
    if isinstance(v, list):
        return "[" + ", ".join(_fmt_value(x) for x in v) + "]"
    if v is None:
        return "-"
    return str(v)


def _check_inputs(data: Any, models: Any) -> list[Realization]:
    if not isinstance(data, Mapping) or data.get("report") != "compare":
        raise InvalidModelError(
            "data: expected a compare report dict (the output of audit.reports.shapes.compare_report) "
            "with report='compare'", field="data")
    if not isinstance(models, Sequence) or not models or not all(
            isinstance(r, Realization) for r in models):
        raise InvalidModelError("models: expected a non-empty list of Realization objects, "
                                "the models of the report in the same order", field="models")
    reported = data.get("models", [])
    if len(reported) != len(models):
        raise InvalidModelError(
            f"models: has {len(models)} realization(s) but the report lists "
            f"{len(reported)} model(s); pass the same models in the same order", field="models")
    for r in models[1:]:
        if not same_time_domain(models[0], r) or (r.n_inputs, r.n_outputs) != (
                models[0].n_inputs, models[0].n_outputs):
            raise InvalidModelError(
                "models: all models must share input/output counts and time domain to be "
                "drawn on one diagram", field="models")
    return list(models)


# ---------------------------------------------------------------------- public
def render_compare_html(
    data: Mapping[str, Any],
    models: Sequence[Realization],
    *,
    claims: Sequence[Mapping[str, Any]] | None = None,
    title: str | None = None,
) -> str:
    """Render a compare report as one self-contained HTML page.

    Parameters
    ----------
    data : dict
        A compare report, the output of :func:`audit.reports.shapes.compare_report`
        (``report == "compare"``).
    models : list of Realization, length ``len(data["models"])``
        The realizations of the report's models in the same order (first = reference);
        each ``A : (n_k, n_k)``, ``B : (n_k, m)``, ``C : (p, n_k)``, ``D : (p, m)``, all in
        one time domain. Used for the Bode diagram, the difference panel, the step
        responses and the pole-zero map.
    claims : sequence of dict, optional, keyword-only
        Checked supplier claims, each with keys ``model``, ``claim``, ``claimed``,
        ``measured``, ``tolerance``, ``outcome`` and ``message`` (as produced by the audit
        service); a claims table is shown when given and non-empty.
    title : str, optional, keyword-only
        Page title; default ``"lti-audit compare report"``.

    Returns
    -------
    str
        A complete HTML5 document (UTF-8 text) with the figures embedded as
        ``data:image/png;base64`` images whose ids are :data:`PLOT_IDS`, an element
        ``id="problem-badge"`` when an unaccepted internal-stability problem exists (the
        report's ``problems`` list when present, else an unstable hidden mode among the
        pairs' warnings), and ending with the caution line :data:`audit.reports.shapes.CAUTION`.

    Raises
    ------
    InvalidModelError
        ``data`` is not a compare report, or ``models`` does not match it.
    NumericalTroubleError
        A figure could not be computed (reported with the reason).

    Examples
    --------
    >>> import time
    >>> from audit.core.realization import Realization
    >>> from audit.reports.shapes import compare_report
    >>> from audit.verdict.compare import Options, compare_models, overall_verdict
    >>> r1 = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]], name="a")
    >>> r2 = Realization.from_arrays([[-1.0]], [[2.0]], [[0.5]], [[0.0]], name="b")
    >>> pairs = compare_models([r1, r2], options=Options())
    >>> data = compare_report([r1, r2], ["a", "b"], pairs, Options(), overall_verdict(pairs), 0.0)
    >>> page = render_compare_html(data, [r1, r2])
    >>> page.startswith("<!DOCTYPE html>") and 'id="plot-pole-zero"' in page
    True
    """
    from audit.reports.shapes import CAUTION, trade_lines

    reals = _check_inputs(data, models)
    problems = _unaccepted_problems(data)
    verdict = str(data.get("verdict", ""))
    heading = title or "lti-audit compare report"
    try:
        bode_mag, bode_phase = _bode_figures(reals, data)
        difference = _difference_figure(reals, data)
        step = _step_figure(reals, data)
        pz = _pole_zero_figure(reals, data)
        markov = _markov_figure(data)
    except AuditError:
        raise
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        raise NumericalTroubleError(f"drawing the report figures failed: {exc}") from exc
    tol = data.get("tolerances", {})
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(heading)}</title><style>{_CSS}</style></head><body>",
        '<header class="top"><div>',
        f"<h1>{_e(heading)}</h1>",
        f'<p><span id="verdict" class="verdict v-{_e(verdict)}">{_e(verdict)}</span>'
        + (f'<span id="problem-badge" class="verdict v-problem" title="{_e("; ".join(problems))}">'
           f"internal stability problem</span>" if problems else "") + "</p>",
        f'<p id="summary">{_e(data.get("summary", ""))}</p>',
        f"<p>lti-audit {_e(data.get('lti_audit_version', ''))}; tolerances: rtol = "
        f"{_e(_num(tol.get('rtol')))}, rank_tol = "
        f"{_e(_num(tol.get('rank_tol')) if tol.get('rank_tol') is not None else 'scale-aware default')}, "
        f"escalation budget {_e(_num(tol.get('escalation_seconds')))} s"
        + (f"; atol = {_e(_num(tol.get('atol')))}" if tol.get("atol") else "")
        + (f"; band of interest {_e(_num(tol['band_rad_s'][0]))} to {_e(_num(tol['band_rad_s'][1]))} rad/s"
           if tol.get("band_rad_s") else "")
        + "".join(f"; rtol = {_e(_num(ch.get('rtol')))} for {_e(ch.get('label', ''))}"
                  for ch in tol.get("channel_rtol") or [])
        + f"; computed in {_e(_num(data.get('seconds')))} s.</p>"
        + (f"<p>Tolerance rule: {_e(tol.get('rule', ''))}.</p>"
           if tol.get("atol") or tol.get("band_rad_s") or tol.get("channel_rtol") else ""),
        "</div></header><main>",
    ]
    if problems:
        parts.append('<div id="problems" class="warn"><b>Unaccepted problems:</b><ul>'
                     + "".join(f"<li>{_e(p)}</li>" for p in problems) + "</ul></div>")
    trade_parts = []
    for pair in data.get("comparisons", []):
        lines = trade_lines(pair, (data.get("models") or [{}])[0])
        if lines:
            trade_parts.append(f"<li><b>{_e(pair.get('other'))}</b> against the reference:"
                               '<ul class="trade">' + "".join(f"<li>{_e(t)}</li>" for t in lines)
                               + "</ul></li>")
    parts.append("<h2>Models</h2><table><tr><th>#</th><th>name</th><th>source</th><th>order</th>"
                 "<th>inputs</th><th>outputs</th><th>time domain</th></tr>")
    for k, m in enumerate(data.get("models", [])):
        sp = m.get("sample_period")
        dom = "continuous" if sp is None else f"discrete, T = {_num(sp)} s"
        parts.append(
            f"<tr><td>{k + 1}{' (reference)' if k == 0 else ''}</td><td>{_e(m.get('name'))}</td>"
            f"<td>{_e(m.get('source'))}</td><td>{_e(m.get('order'))}</td>"
            f"<td>{_e(m.get('inputs'))}</td><td>{_e(m.get('outputs'))}</td><td>{_e(dom)}</td></tr>")
    parts.append("</table>")
    if claims:
        parts.append('<h2>Claims</h2><div id="claims">' + _claims_table(claims) + "</div>")
    parts.append("<h2>Difference to the reference</h2>")
    if trade_parts:
        parts.append('<div id="trade-units"><p>In dB and degrees (gain and phase of each model '
                     'relative to the reference):</p><ul class="trade">' + "".join(trade_parts)
                     + "</ul></div>")
    parts.append(difference)
    parts.append("<h2>Frequency response</h2>" + bode_mag + bode_phase)
    parts.append("<h2>Step responses</h2>" + step)
    parts.append("<h2>Poles and zeros</h2>" + pz)
    parts.append("<h2>Markov parameters</h2>" + markov)
    parts.append("<h2>Evidence</h2>")
    for pair in data.get("comparisons", []):
        pv = str(pair.get("verdict", ""))
        parts.append(
            f"<h3>{_e(pair.get('other'))} against {_e(pair.get('reference'))}: "
            f'<span class="verdict v-{_e(pv)}">{_e(pv)}</span></h3>'
            f"<p>{_e(pair.get('explanation', ''))}</p>")
        for w in pair.get("warnings", []):
            parts.append(f'<p class="warn"><b>Warning:</b> {_e(w)}</p>')
        parts.append(_evidence_table(pair))
    parts.append(f'<p class="caution" id="caution">{_e(CAUTION)}</p>')
    parts.append('</main><div id="zoom" role="dialog" aria-label="enlarged figure">'
                 "<p>Enlarged figure: scroll to pan; click or press Escape to close.</p>"
                 '<img alt=""></div>')
    parts.append(f'<script id="zoom-script">{_ZOOM_SCRIPT}</script></body></html>')
    return "\n".join(parts) + "\n"
