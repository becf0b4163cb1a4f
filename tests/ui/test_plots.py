"""The page's figures skip plotly's property checks: they must be the figures the checks pass.

Each figure is built twice, through plotly's checks (``checked=True``, which raise on any
property plotly.js does not know) and without them, and the JSON Streamlit sends to the
browser must be the same, for every kind of trace the page draws: lines with a ±1 SD band,
markers with error bars, targets, log axes, grouped bars with tolerance lines.
"""

import json

import numpy as np
import plotly.io as pio
import plotly.tools

from phantomlab.ui.plots import Series, bar_figure, line_figure, target_series


def _sent(figure) -> dict:
    """What ``st.plotly_chart`` hands the browser (its own two calls)."""
    return json.loads(pio.to_json(plotly.tools.return_figure_from_figure_or_data(figure, True), validate=False))


def _series() -> list[Series]:
    x = np.linspace(600.0, 900.0, 31)
    return [
        Series("band", x, 1.0 + x / 900.0, sd=np.full(x.size, 0.05)),
        Series("points", x[::5], x[::5] / 400.0, sd=x[::5] / 4000.0, mode="markers"),
        Series("line and points", x, 2.0 - x / 900.0, mode="lines+markers", dash="dot", colour="#123456"),
        Series("no usable SD", x, 0.5 + 0 * x, sd=np.zeros(x.size)),
        target_series("target", x[::10], x[::10] / 300.0),
    ]


def test_line_figure_unchecked_is_the_checked_figure():
    for options in ({}, {"log_y": True, "title": "a title"}, {"log_x": True, "height": 380}):
        checked = line_figure(_series(), x_label="wavelength [nm]", y_label="μa [1/mm]", checked=True, **options)
        quick = line_figure(_series(), x_label="wavelength [nm]", y_label="μa [1/mm]", **options)
        assert _sent(quick) == _sent(checked), options


def test_one_series_figure_unchecked_is_the_checked_figure():
    x = np.arange(5.0)
    one = [Series("only", x, x**2, mode="markers")]
    assert _sent(line_figure(one, x_label="x", y_label="y")) == _sent(line_figure(one, x_label="x", y_label="y",
                                                                                  checked=True))


def test_bar_figure_unchecked_is_the_checked_figure():
    wavelength = np.array([650.0, 700.0, 750.0, 800.0])
    bars = {"μa": np.array([1.0, -2.0, 0.5, 3.0]), "μs′": np.array([-1.0, 0.0, 2.0, -0.5])}
    checked = bar_figure(wavelength, bars, x_label="wavelength [nm]", y_label="%", bands={"μa": 5.0, "μs′": 3.0},
                         title="residual", checked=True)
    quick = bar_figure(wavelength, bars, x_label="wavelength [nm]", y_label="%", bands={"μa": 5.0, "μs′": 3.0},
                       title="residual")
    assert _sent(quick) == _sent(checked)


def test_unchecked_figure_takes_later_changes_as_plotly_checks_them():
    """The history plot sets its ticks after building; the change is checked and sent."""
    figure = line_figure(_series()[:1], x_label="x", y_label="y")
    figure.update_xaxes(tickvals=[700, 800], ticktext=["a", "b"])
    sent = _sent(figure)
    assert sent["layout"]["xaxis"]["tickvals"] == [700, 800]
    assert sent["layout"]["xaxis"]["ticktext"] == ["a", "b"]
    assert sent["layout"]["template"] == _sent(line_figure(_series()[:1], x_label="x", y_label="y",
                                                           checked=True))["layout"]["template"]
