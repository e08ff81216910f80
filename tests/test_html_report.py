"""The HTML compare report: structure, embedded figures, escaping, claims, bad input."""

from __future__ import annotations

import base64
import html
import re
from pathlib import Path

import numpy as np
import pytest

from audit.errors import InvalidModelError
from audit.html_report import render_compare_html
from audit.loading import load_realization
from audit.realization import Realization
from audit.report import CAUTION, compare_report
from audit.verdict import Options, compare_models, overall_verdict

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "demo"
PLOTS = ("plot-bode-magnitude", "plot-bode-phase", "plot-pole-zero", "plot-markov")
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
    assert set(_images(page)) == set(PLOTS)  # 6 channels: sigma_max drawn instead
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

    from audit.html_report import _plot_grid, _responses

    r = load_realization(DEMO / "conveyor_drive_reference.json")
    w = _plot_grid([r])
    g = _responses(r, w)[:, 0, 0]
    # independent: scipy.signal.freqresp of the same state-space matrices
    _, ref = scipy.signal.freqresp(scipy.signal.StateSpace(r.a, r.b, r.c, r.d), w)
    np.testing.assert_allclose(g, ref, rtol=1e-10, atol=1e-14)
    assert w[0] > 0 and w[-1] >= 100 * 20.0  # grid reaches beyond the fastest pole (|p|~20)
