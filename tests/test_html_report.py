"""The HTML compare report: structure, embedded figures, escaping, claims, bad input."""

from __future__ import annotations

import base64
import html
import re
from pathlib import Path

import numpy as np
import pytest

from audit.errors import InvalidModelError
from audit.reports.html_page import render_compare_html
from audit.documents.loading import load_realization
from audit.core.realization import Realization
from audit.reports.shapes import CAUTION, compare_report
from audit.verdict.compare import Options, compare_models, overall_verdict

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "demo"
PLOTS = ("plot-bode-magnitude", "plot-bode-phase", "plot-difference", "plot-step",
         "plot-pole-zero", "plot-markov")
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (W3C/ISO 15948), section 5.2


def _report(models: list[Realization]) -> dict:
    opts = Options(escalate=False)
    pairs = compare_models(models, options=opts)
    return compare_report(models, [m.name for m in models], pairs, opts,
                          overall_verdict(pairs), 0.0)


def _images(page: str) -> dict[str, bytes]:
    found = re.findall(r'<img class="plot" id="([a-z-]+)"[^>]*src="data:image/png;base64,'
                       r'([A-Za-z0-9+/=]+)"', page)
    return {k: base64.b64decode(v) for k, v in found}


def test_demo_page_has_verdict_plots_and_caution() -> None:
    models = [load_realization(DEMO / "conveyor_drive_reference.json"),
              load_realization(DEMO / "conveyor_drive_gain_slip.json")]
    data = _report(models)
    page = render_compare_html(data, models)
    assert page.startswith("<!DOCTYPE html>") and page.rstrip().endswith("</html>")
    assert 'class="verdict v-different"' in page
    imgs = _images(page)
    assert set(imgs) == set(PLOTS)
    for png in imgs.values():
        assert png.startswith(PNG_SIGNATURE) and len(png) > 5000
    assert html.escape(CAUTION) in page
    assert page.rstrip().rfind(html.escape(CAUTION)) > page.find('id="plot-markov"')
    assert 'id="claims"' not in page  # no claims given: no claims table


def test_discrete_mimo_page_and_claims_table() -> None:
    rng = np.random.default_rng(3)
    a = np.diag([0.5, -0.3, 0.8])
    r1 = Realization.from_arrays(a, rng.standard_normal((3, 3)), rng.standard_normal((2, 3)),
                                 np.zeros((2, 3)), 0.01, name="big mimo")
    r2 = r1.with_name("copy")
    page = render_compare_html(_report([r1, r2]), [r1, r2], claims=[
        {"model": "copy", "claim": "dc_gain", "claimed": 1.5, "measured": 1.5004,
         "tolerance": 1e-3, "outcome": "holds", "message": "ok"}])
    assert set(_images(page)) == set(PLOTS)  # 6 channels: one small panel each
    assert 'id="claims"' in page and "dc_gain" in page and "o-holds" in page


def test_user_text_is_escaped() -> None:
    r1 = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]],
                                 name='<script>alert("x")</script>')
    r2 = Realization.from_arrays([[-1.0]], [[2.0]], [[0.5]], [[0.0]], name="b & c")
    page = render_compare_html(_report([r1, r2]), [r1, r2], claims=[
        {"model": "<img src=x onerror=1>", "claim": "stable", "claimed": True,
         "measured": "stable", "tolerance": None, "outcome": "holds", "message": "<b>"}])
    assert "<script>" not in page and "<img src=x" not in page
    assert "&lt;script&gt;" in page and "b &amp; c" in page


@pytest.mark.parametrize(
    ("data", "models", "field"),
    [
        pytest.param({"report": "inspect"}, None, "data", id="not-compare"),
        pytest.param(None, [], "models", id="no-models"),
        pytest.param(None, "one", "models", id="count-mismatch"),
    ],
)
def test_bad_input_raises_our_error(data: object, models: object, field: str) -> None:
    r1 = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]], name="a")
    r2 = Realization.from_arrays([[-2.0]], [[1.0]], [[1.0]], [[0.0]], name="b")
    good = _report([r1, r2])
    with pytest.raises(InvalidModelError) as info:
        render_compare_html(good if data is None else data,  # type: ignore[arg-type]
                            [r1] if models == "one" else ([r1, r2] if models is None else models))  # type: ignore[arg-type]
    assert info.value.field == field


def test_plotted_response_matches_scipy() -> None:
    import scipy.signal

    from audit.reports.html_page import _plot_grid, _responses

    r = load_realization(DEMO / "conveyor_drive_reference.json")
    w = _plot_grid([r])
    g = _responses(r, w)[:, 0, 0]
    # independent: scipy.signal.freqresp of the same state-space matrices
    _, ref = scipy.signal.freqresp(scipy.signal.StateSpace(r.a, r.b, r.c, r.d), w)
    np.testing.assert_allclose(g, ref, rtol=1e-10, atol=1e-14)
    # grid reaches beyond the fastest pole (|p|~20; computed from a realization, so up to
    # rounding of its eigenvalues)
    assert w[0] > 0 and w[-1] >= 100 * 20.0 * (1 - 1e-12)


# ---------------------------------------------------------------- the page a reader opens
def _doc_models(*names: str) -> tuple[list[Realization], dict]:
    from audit.documents.loading import load_model_document, realization_from_document
    from audit.reports.shapes import signal_labels

    docs = [load_model_document(DEMO / n) for n in names]
    models = [realization_from_document(d).with_name(d.name) for d in docs]
    opts = Options(escalate=False)
    pairs = compare_models(models, options=opts)
    data = compare_report(models, list(names), pairs, opts, overall_verdict(pairs), 0.0,
                          signals=[signal_labels(d) for d in docs])
    return models, data


def test_difference_panel_is_relative_to_peak_and_hides_rounding_noise() -> None:
    import scipy.signal

    from audit.reports.html_page import _difference_curves, _plot_grid

    models, data = _doc_models("conveyor_drive_reference.json", "conveyor_drive_refactored.json",
                               "conveyor_drive_gain_slip.json")
    w = _plot_grid(models)
    (rel_same, floor_same), (rel_slip, floor_slip) = _difference_curves(models, data, w)
    # the refactor is the same system: every point lies below its rounding-error estimate,
    # so nothing is drawn (no -300 dB noise)
    assert np.all(rel_same <= floor_same)
    # the gear-ratio change, independently: scipy.signal.freqresp of both state-space models,
    # |G2 - G1| / peak gain (peak from the report's decisive evidence)
    def resp(r: Realization) -> np.ndarray:
        return scipy.signal.freqresp(scipy.signal.StateSpace(r.a, r.b, r.c, r.d), w)[1]
    peak = data["comparisons"][1]["evidence"][0]["details"]["reference_peak_gain"]
    ref = np.abs(resp(models[2]) - resp(models[0])) / peak
    np.testing.assert_allclose(rel_slip, ref, rtol=1e-8)
    assert np.all(rel_slip[:10] > floor_slip[:10])  # the real difference is drawn
    # constant 2 % output scale: about 0.0196 of the peak gain at low frequency (the
    # report's decisive value; the factor x1.02 is in the demo document's provenance)
    assert rel_slip[0] == pytest.approx(0.0196, rel=0.01)


def test_phase_has_no_jump_at_a_zero_on_z_equals_minus_one() -> None:
    import scipy.signal

    from audit.reports.html_page import _plot_grid, _responses, _unwrapped_phase

    # G(z) = 0.1 (z + 1) / (z - 0.8), T = 0.01 s: a bilinear-type first-order lag whose
    # zero at z = -1 makes G exactly 0 at Nyquist (angle undefined there)
    r = Realization.from_arrays([[0.8]], [[1.0]], [[0.18]], [[0.1]], 0.01, name="filter")
    w = _plot_grid([r])
    assert w[-1] == pytest.approx(np.pi / 0.01, rel=1e-12)  # the grid reaches Nyquist
    phase = _unwrapped_phase(_responses(r, w)[:, 0, 0])
    finite = phase[np.isfinite(phase)]
    # independent: scipy.signal.freqz of the same coefficients, below Nyquist
    _, h = scipy.signal.freqz([0.1, 0.1], [1.0, -0.8], worN=w[:-1] * 0.01)
    np.testing.assert_allclose(phase[:-1], np.degrees(np.unwrap(np.angle(h))), atol=1e-9)
    assert np.max(np.abs(np.diff(finite))) < 5.0  # smooth: no jump to 0 deg
    assert finite[-1] == pytest.approx(-90.0, abs=1.0)  # closed form: the lag tends to -90 deg
    assert not np.isfinite(phase[-1])  # the exact zero is left out, not drawn at 0 deg


def test_mimo_panels_are_labelled_with_signal_names_and_units() -> None:
    from audit.reports.html_page import _channel_title

    models, data = _doc_models("heated_zones_reference.json", "heated_zones_swapped_outputs.json")
    assert _channel_title(data, 0, 1, 2, 2) == "zone_1_temperature [degC]  \u2190  heater_2 [W]"
    page = render_compare_html(data, models)
    assert set(_images(page)) == set(PLOTS)
    assert 'id="trade-units"' in page and "zone_2_temperature [degC]" in page


def _hidden_pair() -> tuple[list[Realization], dict]:
    r1 = Realization.from_arrays([[-1.0]], [[1.0]], [[2.0]], [[0.0]], name="valve positioner")
    r2 = Realization.from_arrays([[-1.0, 0.0], [0.0, 0.5]], [[1.0], [0.0]], [[2.0, 1.0]], [[0.0]],
                                 name="valve positioner with hidden drift")
    return [r1, r2], _report([r1, r2])


def test_unstable_hidden_mode_gives_a_problem_badge_and_a_ringed_mode() -> None:
    from audit.reports.html_page import _hidden_modes

    models, data = _hidden_pair()
    page = render_compare_html(data, models)
    assert 'class="verdict v-equivalent"' in page  # transfer functions agree ...
    assert 'id="problem-badge"' in page and 'id="problems"' in page  # ... but a problem
    # the uncontrollable mode at s = +0.5 (by construction: B has no entry on state 2)
    hidden = _hidden_modes(data)["valve positioner with hidden drift"]
    assert len(hidden) == 1 and hidden[0]["unstable"]
    assert hidden[0]["re"] == pytest.approx(0.5, abs=1e-12)


@pytest.mark.parametrize("accepted", [True, False])
def test_problem_list_decides_the_badge_when_present(accepted: bool) -> None:
    models, data = _hidden_pair()
    data = dict(data, problems=[{
        "kind": "unstable_hidden_mode", "model": models[1].name, "location": [0.5, 0.0],
        "coupling": {"inputs": 0.0, "outputs": 1.0}, "classification": "hidden",
        "accepted": accepted, "reason": "drift is compensated upstream" if accepted else None,
        "message": "unstable hidden mode at 0.5"}])
    from audit.reports.html_page import _unaccepted_problems

    # the badge is shown exactly when this list is non-empty (render_compare_html)
    assert bool(_unaccepted_problems(data)) is (not accepted)


def test_equivalent_page_has_no_problem_badge_and_numbers_do_not_wrap() -> None:
    r1 = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]], name="a")
    r2 = Realization.from_arrays([[-1.0]], [[2.0]], [[0.5]], [[0.0]], name="b")
    page = render_compare_html(_report([r1, r2]), [r1, r2])
    assert 'id="problem-badge"' not in page
    assert "td.num{white-space:nowrap" in page and '<td class="num">' in page
    widths = [int.from_bytes(png[16:20], "big") for png in _images(page).values()]
    # PNG IHDR width (PNG specification, section 11.2.2): every figure at least 900 px wide
    assert min(widths) >= 900
    assert "://" not in page and "<script src" not in page  # offline: nothing fetched


def test_problem_list_hidden_modes_are_placed_on_the_map() -> None:
    from audit.reports.html_page import _hidden_modes

    models, data = _hidden_pair()
    data = dict(data, problems=[{
        "kind": "marginal_hidden_mode", "model": models[1].name, "location": [0.0, 2.0],
        "coupling": {"inputs": 1e-9, "outputs": 1.0}, "classification": "nearly_hidden",
        "accepted": False, "reason": None, "message": "nearly hidden mode at 2j"}])
    modes = _hidden_modes(data)[models[1].name]
    marginal = [h for h in modes if h["kind"] == "marginal_hidden_mode"]
    assert len(marginal) == 1 and not marginal[0]["unstable"] and marginal[0]["im"] == 2.0
    assert any(h["unstable"] and h["re"] == pytest.approx(0.5) for h in modes)
    page = render_compare_html(data, models)
    assert 'id="problem-badge"' in page and "nearly hidden mode at 2j" in page
