"""The plan PNG and the back-test report wear floorcast's own palette and words.

The checks read the drawn matplotlib artists back (colours, legend texts, marker
positions), so a plot that silently fell back to matplotlib's default colour cycle,
or marked a floor change at the wrong instant, fails here.
"""

from __future__ import annotations

import struct

import matplotlib.colors as mcolors
import matplotlib.pyplot as plt
import numpy as np
import pytest

from floorcast import plotstyle as ps
from floorcast import scenario
from floorcast.cli.plots import draw_plan, plot_plan
from floorcast.plans import plan_policy
from floorcast.policy import load_policy_text

#: matplotlib's default colour cycle ("tab10"), read from matplotlib itself.
DEFAULT_CYCLE = {mcolors.to_hex(c) for c in plt.get_cmap("tab10").colors}
COLOURS = (ps.INK, ps.FORECAST, ps.BAND, ps.FLOOR, ps.SIZED_ON, ps.REQUIRED, ps.CEILING)
PALETTE = {mcolors.to_hex(c) for c in (*COLOURS, ps.RAISED, ps.LOWERED, ps.UNCOVERED)}


@pytest.fixture(scope="module")
def plan():
    spec = load_policy_text(scenario.policy_text("storefront"), source="storefront.yaml").spec
    fc = scenario.demo_forecast("storefront")
    return plan_policy(spec, fc, baseline=2, hpa_max=20, at=fc.start)


def test_palette_is_not_matplotlibs_default_cycle():
    assert not PALETTE & DEFAULT_CYCLE


def test_plan_figure_uses_only_the_palette(plan):
    fig = draw_plan(plan, title="t")
    try:
        used = set()
        for ax in fig.axes:
            used |= {mcolors.to_hex(line.get_color()) for line in ax.get_lines()}
            for coll in ax.collections:
                used |= {mcolors.to_hex(c) for c in coll.get_facecolor()}
        assert used, "nothing drawn"
        assert used <= PALETTE, used - PALETTE
    finally:
        plt.close(fig)


def test_floor_changes_are_marked_where_the_plan_changes(plan):
    rises = [c for c in plan.changes if c.new > c.old]
    falls = [c for c in plan.changes if c.new < c.old]
    assert rises and falls  # the demo day has both, or this test proves nothing
    fig = draw_plan(plan, title="t")
    try:
        replicas = fig.axes[1]
        labels = [t.get_text() for t in replicas.get_legend().get_texts()]
        assert f"floor changes: raised ({len(rises)})" in labels
        assert f"floor changes: lowered ({len(falls)})" in labels
        (up,) = [ln for ln in replicas.get_lines() if ln.get_marker() == ps.RAISED_MARKER]
        assert list(up.get_ydata()) == [c.new for c in rises]
        want = np.array([c.at.tz_convert("UTC").tz_localize(None) for c in rises], "M8[ns]")
        got = np.array(up.get_xdata(), dtype="M8[ns]")
        assert (got == want).all()
        words = {t.get_text() for ax in fig.axes for t in ax.get_legend().get_texts()}
        assert ps.WORDS["band"] in words and ps.WORDS["floor"] in words
        assert not any("change point" in w for w in words)
    finally:
        plt.close(fig)


def test_plot_plan_writes_a_png_of_the_figure_size(plan, tmp_path):
    out = tmp_path / "sub" / "plan.png"
    plot_plan(plan, out, title="t")
    head = out.read_bytes()[:24]
    assert head[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification, 5.2)
    width, height = struct.unpack(">II", head[16:24])  # IHDR width/height
    assert (width, height) == (11 * 110, round(6.5 * 110))


def _near(img: np.ndarray, colour: str, tol: float = 0.02) -> int:
    """How many pixels are (almost) exactly ``colour``."""
    rgb = np.array(mcolors.to_rgb(colour))
    return int((np.abs(img[..., :3] - rgb).max(axis=-1) < tol).sum())


def test_backtest_report_shares_the_palette(tmp_path):
    import base64
    import io
    import re

    import matplotlib.image as mimage

    from floorcast import replay
    from floorcast.cli.report import write_report

    spec = load_policy_text(scenario.policy_text("storefront"), source="storefront.yaml").spec
    setup = replay.Setup(baseline=2, hpa_max=30, target_utilization=0.8, per_replica=0.8,
                         method="seasonal-naive", season="1d")  # fmt: skip
    result = replay.run(spec, scenario.history("storefront", step="5min"), setup)
    out = tmp_path / "r.html"
    write_report(result, out, title="shop/storefront", target=0.8)
    page = out.read_text()
    assert ps.css() in page and "#ccc" not in page  # the page's own stylesheet is the palette's
    # Two pictures: the frontier (saturation against replica-hours), then the time plots.
    frontier, data = re.findall(r"base64,([A-Za-z0-9+/=]+)", page)
    first = mimage.imread(io.BytesIO(base64.b64decode(frontier)), format="png")
    assert _near(first[:1, :1], ps.PAPER) == 1
    assert _near(first, ps.FLOOR) > 20 and _near(first, ps.SIZED_ON) > 20
    img = mimage.imread(io.BytesIO(base64.b64decode(data)), format="png")
    assert _near(img[:1, :1], ps.PAPER) == 1  # the paper, not matplotlib's white
    assert _near(img, ps.FLOOR) > 100 and _near(img, ps.SIZED_ON) > 100  # floorcast and HPA rows
    # matplotlib's blue, orange, green and red (tab10's first four): none of them
    # anywhere. Its grey is left out: anti-aliased ink on paper passes through greys.
    saturated = DEFAULT_CYCLE & {"#1f77b4", "#ff7f0e", "#2ca02c", "#d62728"}
    assert len(saturated) == 4
    for default in sorted(saturated):
        assert _near(img, default) == 0, default
