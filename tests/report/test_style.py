"""The palette stays readable in grey scale; figures carry no global state."""

import itertools

import matplotlib
import pytest

from fstats.report.style import (
    HARBOUR,
    channel_style,
    new_figure,
    plain_label,
    relative_luminance,
    series_style,
)


def test_relative_luminance_worked_values():
    """Source: WCAG 2.x relative-luminance formula, worked by hand: white 1, black 0,
    #808080 -> ((0.50196+0.055)/1.055)**2.4 = 0.21586."""
    assert relative_luminance("#ffffff") == pytest.approx(1.0)
    assert relative_luminance("#000000") == pytest.approx(0.0)
    assert relative_luminance("#808080") == pytest.approx(0.21586, abs=1e-4)


def test_neighbouring_series_differ_in_grey_value():
    """Source: common practice - series that differ only in hue merge in grey scale, so
    consecutive palette colours must differ clearly in luminance (here > 0.1)."""
    lum = [relative_luminance(c) for c in HARBOUR]
    for a, b in itertools.pairwise(lum):
        assert abs(a - b) > 0.1


def test_series_differ_in_line_style_and_marker():
    """Source: common practice - line style and marker carry the series without colour."""
    styles = [series_style(i) for i in range(6)]
    assert len({str(s.linestyle) for s in styles}) == 6
    assert len({s.marker for s in styles}) == 6
    assert channel_style(0, True).linestyle != channel_style(0, False).linestyle


def test_new_figure_leaves_pyplot_and_rcparams_alone():
    """Source: common practice - a library builds Figure objects and leaves matplotlib's
    global state (rcParams, pyplot figure list) untouched."""
    from matplotlib._pylab_helpers import Gcf

    before = dict(matplotlib.rcParams)
    managers = Gcf.get_num_fig_managers()
    fig, ax = new_figure(4, 3)
    ax.plot([0, 1], [0, 1])
    fig.canvas.draw()
    assert dict(matplotlib.rcParams) == before
    assert Gcf.get_num_fig_managers() == managers
    assert type(fig.canvas).__name__ == "FigureCanvasAgg"


def test_plain_label_blocks_mathtext_and_hidden_legend():
    """Source: matplotlib documentation - "$...$" starts mathtext and a leading "_" hides
    a legend entry; user names must show literally."""
    assert plain_label("a$b$") == r"a\$b\$"
    assert plain_label("_x") == " _x"


def test_channel_styles_differ_in_grey_value_or_line_style():
    """Source: common practice - the first two long channels differ in grey value
    (luminance gap > 0.1); any two channel styles differ in grey value or line style."""
    styles = [channel_style(i, False) for i in range(3)] + [channel_style(0, True)]
    assert abs(relative_luminance(styles[0].color) - relative_luminance(styles[1].color)) > 0.1
    for a, b in itertools.combinations(styles, 2):
        gap = abs(relative_luminance(a.color) - relative_luminance(b.color))
        assert gap > 0.1 or a.linestyle != b.linestyle
