"""A self-contained HTML page for a compare report (offline and in the audit service).

The page shows the verdict and its explanation, the models, the evidence of every pair,
a table of supplier claims (when claims were checked), and four figures drawn with
matplotlib's Agg backend and embedded as base64 PNG images (``<img id="plot-...">``):

* ``plot-bode-magnitude`` / ``plot-bode-phase`` -- the frequency responses of the models
  overlaid (Bode diagram: H. W. Bode, *Network Analysis and Feedback Amplifier Design*,
  1945), with the magnitude of the difference ``G_k - G_1`` of every model against the
  first (dashed) on the magnitude plot;
* ``plot-pole-zero`` -- poles (x) and transmission zeros (o) of every model, with the unit
  circle for discrete-time models;
* ``plot-markov`` -- the term-by-term relative difference of the frequency-scaled Markov
  parameters ``D, CB, CAB, ...`` of every pair, with the tolerance, read from the
  report's ``markov_parameters`` evidence (no numerics are repeated for it).

No numerical method of its own is implemented here: responses, zeros and the frequency
grid come from :mod:`audit.frequency` and :mod:`audit.structure`. Every string that came
from a user (model names, sources, claims) is HTML-escaped. Figures are built with the
object-oriented :class:`matplotlib.figure.Figure` API, never ``pyplot``, so that
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

from .errors import AuditError, InvalidModelError, NumericalTroubleError
from .realization import Realization, same_time_domain

__all__ = ["MAX_CHANNELS_PLOTTED", "render_compare_html"]

MAX_CHANNELS_PLOTTED = 4
"""At most this many (output, input) channels are drawn in the Bode diagram; for larger
models the largest singular value sigma_max(G) is drawn instead (no phase)."""

_POINTS_PER_DECADE = 40

_CSS = """
body{font-family:system-ui,-apple-system,Segoe UI,Roboto,sans-serif;margin:2em auto;
max-width:1100px;color:#222;line-height:1.4;padding:0 1em}
h1{font-size:1.5em}h2{font-size:1.2em;border-bottom:1px solid #ccc;padding-bottom:.2em;
margin-top:1.6em}
table{border-collapse:collapse;margin:.5em 0;font-size:.92em}
th,td{border:1px solid #ccc;padding:.25em .5em;text-align:left;vertical-align:top}
th{background:#f3f3f3}
.verdict{display:inline-block;padding:.3em .8em;border-radius:4px;font-weight:bold;
color:#fff;text-transform:uppercase;letter-spacing:.05em}
.v-equivalent,.o-pass,.o-holds{background:#2e7d32}
.v-different,.o-fail,.o-fails{background:#c62828}
.v-inconclusive,.o-unclear,.o-not_checkable{background:#ef6c00}
.o-info,.o-skipped,.o-not_computed{background:#757575}
td.o{color:#fff;font-weight:bold;text-align:center}
figure{margin:1em 0}figcaption{font-size:.9em;color:#555}
img.plot{max-width:100%;height:auto;border:1px solid #eee}
.caution{margin-top:2em;padding:.8em;border-left:4px solid #ef6c00;background:#fff8e1}
code{font-size:.95em}
"""


# --------------------------------------------------------------------- helpers
def _e(value: Any) -> str:
    from .safe_output import xml_text  # no control characters or escape sequences

    return html.escape(xml_text(str(value)), quote=True)


def _num(value: Any) -> str:
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


def _png(fig: Any) -> str:
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    from .safe_output import plain_plot_labels

    FigureCanvasAgg(fig)
    plain_plot_labels(fig)  # names are plain text, never math for the plotting library
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=96, bbox_inches="tight")
    return base64.b64encode(buf.getvalue()).decode("ascii")


def _img(plot_id: str, fig: Any, alt: str, caption: str) -> str:
    return (
        f'<figure><img class="plot" id="{plot_id}" alt="{_e(alt)}" '
        f'src="data:image/png;base64,{_png(fig)}"><figcaption>{_e(caption)}</figcaption>'
        "</figure>"
    )


def _new_figure(width: float = 9.0, height: float = 4.0) -> Any:
    from matplotlib.figure import Figure

    return Figure(figsize=(width, height))


def _plot_grid(models: Sequence[Realization]) -> NDArray[np.float64]:
    from .frequency import adaptive_frequency_grid

    w = adaptive_frequency_grid(list(models), points_per_decade=_POINTS_PER_DECADE)
    w = w[w > 0]
    if w.size == 0:  # static gains only
        w = np.logspace(-2, 2, 50)
        if models[0].sample_period is not None:
            w = w[w <= math.pi / models[0].sample_period]
    return w


def _responses(r: Realization, w: NDArray[np.float64]) -> NDArray[np.complex128]:
    """(k, p, m) frequency response; NaN where a frequency hits a boundary pole."""
    from .frequency import frequency_response

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


def _bode_figures(models: Sequence[Realization]) -> tuple[str, str, str]:
    w = _plot_grid(models)
    resp = [_responses(r, w) for r in models]
    chans = _channels(models)
    colours = [f"C{k % 10}" for k in range(len(models))]
    mag_fig = _new_figure(9.0, 4.6)
    ax = mag_fig.add_subplot(1, 1, 1)
    phase_fig = _new_figure(9.0, 3.8)
    axp = phase_fig.add_subplot(1, 1, 1)
    styles = ["-", "--", ":", "-."]
    for k, (r, g) in enumerate(zip(models, resp)):
        label = r.name or f"model {k + 1}"
        if chans is None:
            ax.semilogx(w, _to_db(_sigma_max(g)), color=colours[k], label=f"{label} (sigma_max)")
            continue
        for c, (i, j) in enumerate(chans):
            suffix = "" if len(chans) == 1 else f" y{i}<-u{j}"
            ax.semilogx(w, _to_db(np.abs(g[:, i, j])), color=colours[k],
                        linestyle=styles[c % len(styles)], label=label + suffix)
            with np.errstate(invalid="ignore"):
                phase = np.degrees(np.unwrap(np.nan_to_num(np.angle(g[:, i, j]))))
            axp.semilogx(w, phase, color=colours[k], linestyle=styles[c % len(styles)],
                         label=label + suffix)
    for k in range(1, len(models)):
        diff = _sigma_max(resp[k] - resp[0])
        ax.semilogx(w, _to_db(diff), color=colours[k], linestyle=(0, (2, 2)), alpha=0.8,
                    label=f"difference: {models[k].name or k + 1} - {models[0].name or 1}")
    nyquist = None if models[0].sample_period is None else math.pi / models[0].sample_period
    for a in (ax, axp):
        a.grid(True, which="both", alpha=0.3)
        a.set_xlabel("frequency [rad/s]")
        if nyquist is not None:
            a.axvline(nyquist, color="k", linewidth=0.8, alpha=0.5)
    ax.set_ylabel("magnitude [dB]")
    ax.set_title("Bode magnitude (dashed thin: magnitude of the difference to the first model)")
    ax.legend(fontsize=7, loc="best")
    if chans is None:
        axp.text(0.5, 0.5, f"phase not drawn: more than {MAX_CHANNELS_PLOTTED} channels",
                 ha="center", va="center", transform=axp.transAxes)
    else:
        axp.legend(fontsize=7, loc="best")
    axp.set_ylabel("phase [deg]")
    axp.set_title("Bode phase")
    caption = (f"{w.size} frequencies from {w[0]:.3g} to {w[-1]:.3g} rad/s"
               + ("" if nyquist is None else f"; vertical line: Nyquist frequency {nyquist:.4g} rad/s"))
    return (
        _img("plot-bode-magnitude", mag_fig, "Bode magnitude of the models and their difference", caption),
        _img("plot-bode-phase", phase_fig, "Bode phase of the models", caption),
        caption,
    )


def _pole_zero_figure(models: Sequence[Realization]) -> str:
    from .structure import transmission_zeros

    fig = _new_figure(6.0, 5.0)
    ax = fig.add_subplot(1, 1, 1)
    notes: list[str] = []
    markers_p = ["x", "+", "1", "2", "3", "4"]
    for k, r in enumerate(models):
        label = r.name or f"model {k + 1}"
        poles = r.poles()
        try:
            zeros = transmission_zeros(r)
        except (NumericalTroubleError, InvalidModelError) as exc:
            zeros = np.zeros(0, dtype=complex)
            notes.append(f"zeros of {label} not drawn ({exc})")
        if poles.size:
            ax.scatter(poles.real, poles.imag, marker=markers_p[k % len(markers_p)], s=60,
                       color=f"C{k % 10}", label=f"poles: {label}")
        if zeros.size:
            ax.scatter(zeros.real, zeros.imag, marker="o", s=50, facecolors="none",
                       edgecolors=f"C{k % 10}", label=f"zeros: {label}")
    if models[0].sample_period is not None:
        t = np.linspace(0, 2 * math.pi, 361)
        ax.plot(np.cos(t), np.sin(t), color="k", linewidth=0.7, alpha=0.5)
        ax.set_aspect("equal", adjustable="datalim")
        ax.set_xlabel("Re z")
        ax.set_ylabel("Im z")
    else:
        ax.axvline(0.0, color="k", linewidth=0.7, alpha=0.5)
        ax.set_xlabel("Re s [rad/s]")
        ax.set_ylabel("Im s [rad/s]")
    ax.axhline(0.0, color="k", linewidth=0.5, alpha=0.3)
    ax.grid(True, alpha=0.3)
    ax.set_title("Poles (x) and transmission zeros (o)")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=7, loc="best")
    caption = "Poles include hidden (uncontrollable or unobservable) modes."
    if notes:
        caption += " " + "; ".join(notes)
    return _img("plot-pole-zero", fig, "pole-zero map", caption)


def _markov_figure(data: Mapping[str, Any]) -> str:
    fig = _new_figure(9.0, 4.0)
    ax = fig.add_subplot(1, 1, 1)
    drawn = 0
    tolerance = None
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
        floor = 1e-18
        idx = np.arange(rel.size)
        ax.semilogy(idx, np.maximum(rel, floor), marker="o", color=f"C{(k + 1) % 10}",
                    label=f"{pair.get('other')} vs {pair.get('reference')}")
        if err.size == rel.size:
            ax.semilogy(idx, np.maximum(err, floor), linestyle=":", color=f"C{(k + 1) % 10}",
                        alpha=0.7, label="rounding-error estimate")
        drawn += 1
    if tolerance is not None:
        ax.axhline(float(tolerance), color="k", linestyle="--", linewidth=1.0,
                   label=f"tolerance {float(tolerance):.1e}")
    if drawn == 0:
        ax.text(0.5, 0.5, "no Markov parameter comparison in this report", ha="center",
                va="center", transform=ax.transAxes)
    else:
        ax.legend(fontsize=7, loc="best")
    ax.set_xlabel("term k (0: D, 1: CB, 2: CAB, ...)")
    ax.set_ylabel("relative difference")
    ax.set_title("Scaled Markov parameters: term-by-term relative difference")
    ax.grid(True, which="both", alpha=0.3)
    return _img("plot-markov", fig, "Markov parameter comparison",
                "Differences are relative to the largest term of either model, on a "
                "frequency-scaled copy of both (values below 1e-18 drawn at 1e-18).")


def _evidence_table(pair: Mapping[str, Any]) -> str:
    rows = []
    for ev in pair.get("evidence", []):
        outcome = str(ev.get("outcome", ""))
        rows.append(
            "<tr>"
            f"<td>{_e(ev.get('title', ''))}{' <b>(decisive)</b>' if ev.get('decisive') else ''}</td>"
            f"<td>{_e(_num(ev.get('value')))}</td><td>{_e(_num(ev.get('tolerance')))}</td>"
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
            f"<td>{_e(_num(c.get('tolerance')))}</td>"
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
            "data: expected a compare report dict (the output of audit.report.compare_report) "
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
        A compare report, the output of :func:`audit.report.compare_report`
        (``report == "compare"``).
    models : list of Realization, length ``len(data["models"])``
        The realizations of the report's models in the same order (first = reference);
        each ``A : (n_k, n_k)``, ``B : (n_k, m)``, ``C : (p, n_k)``, ``D : (p, m)``, all in
        one time domain. Used for the Bode diagram and the pole-zero map.
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
        ``data:image/png;base64`` images whose ids are ``plot-bode-magnitude``,
        ``plot-bode-phase``, ``plot-pole-zero`` and ``plot-markov``, ending with the
        caution line :data:`audit.report.CAUTION`.

    Raises
    ------
    InvalidModelError
        ``data`` is not a compare report, or ``models`` does not match it.
    NumericalTroubleError
        A figure could not be computed (reported with the reason).

    Examples
    --------
    >>> import time
    >>> from audit.realization import Realization
    >>> from audit.report import compare_report
    >>> from audit.verdict import Options, compare_models, overall_verdict
    >>> r1 = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]], name="a")
    >>> r2 = Realization.from_arrays([[-1.0]], [[2.0]], [[0.5]], [[0.0]], name="b")
    >>> pairs = compare_models([r1, r2], options=Options())
    >>> data = compare_report([r1, r2], ["a", "b"], pairs, Options(), overall_verdict(pairs), 0.0)
    >>> page = render_compare_html(data, [r1, r2])
    >>> page.startswith("<!DOCTYPE html>") and 'id="plot-pole-zero"' in page
    True
    """
    from .report import CAUTION

    reals = _check_inputs(data, models)
    verdict = str(data.get("verdict", ""))
    heading = title or "lti-audit compare report"
    try:
        bode_mag, bode_phase, _ = _bode_figures(reals)
        pz = _pole_zero_figure(reals)
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
        f"<h1>{_e(heading)}</h1>",
        f'<p><span id="verdict" class="verdict v-{_e(verdict)}">{_e(verdict)}</span></p>',
        f'<p id="summary">{_e(data.get("summary", ""))}</p>',
        f"<p>lti-audit {_e(data.get('lti_audit_version', ''))}; tolerances: rtol = "
        f"{_e(_num(tol.get('rtol')))}, rank_tol = {_e(_num(tol.get('rank_tol')))}, "
        f"escalation budget {_e(_num(tol.get('escalation_seconds')))} s"
        + (f"; atol = {_e(_num(tol.get('atol')))}" if tol.get("atol") else "")
        + (f"; band of interest {_e(_num(tol['band_rad_s'][0]))} to {_e(_num(tol['band_rad_s'][1]))} rad/s"
           if tol.get("band_rad_s") else "")
        + "".join(f"; rtol = {_e(_num(ch.get('rtol')))} for {_e(ch.get('label', ''))}"
                  for ch in tol.get("channel_rtol") or [])
        + f"; computed in {_e(_num(data.get('seconds')))} s.</p>"
        + (f"<p>Tolerance rule: {_e(tol.get('rule', ''))}.</p>"
           if tol.get("atol") or tol.get("band_rad_s") or tol.get("channel_rtol") else ""),
        "<h2>Models</h2><table><tr><th>#</th><th>name</th><th>source</th><th>order</th>"
        "<th>inputs</th><th>outputs</th><th>time domain</th></tr>",
    ]
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
    parts.append("<h2>Frequency response</h2>" + bode_mag + bode_phase)
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
            parts.append(f"<p><b>Warning:</b> {_e(w)}</p>")
        parts.append(_evidence_table(pair))
    parts.append(f'<p class="caution" id="caution">{_e(CAUTION)}</p>')
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"
