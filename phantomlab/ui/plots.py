"""Interactive plots of the page (layer 5): plotly figures with hover values and downloads.

Every figure names the quantity and its unit on both axes, shows the values under the
pointer, can be saved as PNG from its tool bar, and comes with a CSV of the plotted numbers.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import streamlit as st

__all__ = ["Chart", "Series", "bar_figure", "line_figure", "show_chart", "show_figure", "target_series"]

# A plain palette of our own: predicted / fitted lines dark, targets and data as markers.
COLOURS = ("#1f4e79", "#c08a00", "#b5462f", "#7a5195", "#3b7d3b", "#4b4b4b", "#00838f")
TARGET_COLOUR = "#000000"
GRID_COLOUR = "#e6e6e6"


@dataclass(frozen=True)
class Chart:
    """A figure ready to show: with the table of its numbers, the download's name and a widget key."""

    figure: go.Figure
    table: pd.DataFrame
    file_stem: str
    key: str


@dataclass(frozen=True)
class Series:
    """One trace: x and y with units, an optional ± band (1 SD) and how to draw it."""

    name: str
    x: np.ndarray
    y: np.ndarray
    sd: np.ndarray | None = None
    mode: str = "lines"  # "lines", "markers", "lines+markers"
    dash: str | None = None
    colour: str | None = None  # default: the next colour of the palette
    symbol: str | None = None  # marker symbol (plotly name), e.g. "circle-open" for targets


def _drop_none(mapping: dict) -> dict:
    return {key: value for key, value in mapping.items() if value is not None}


def line_figure(
    series: list[Series],
    *,
    x_label: str,
    y_label: str,
    title: str | None = None,
    log_y: bool = False,
    log_x: bool = False,
    height: int = 340,
    checked: bool = False,
) -> go.Figure:
    """A figure of spectra (or any x–y series) with shaded ±1 SD bands where given.

    The traces and the layout are put together as plain dicts and handed to plotly once: a
    figure grown trace by trace is checked again at every step (about ten times slower).
    plotly's property checks (most of the cost of building a figure) are skipped: the dicts
    are ours and fixed, and ``checked=True`` builds the same figure through them (a test
    holds the two equal).
    """
    traces: list[dict] = []
    for index, item in enumerate(series):
        colour = item.colour or COLOURS[index % len(COLOURS)]
        x = np.asarray(item.x, dtype=float)
        y = np.asarray(item.y, dtype=float)
        sd = None if item.sd is None else np.asarray(item.sd, dtype=float)
        if sd is not None and not np.any(np.isfinite(sd) & (sd > 0)):
            sd = None
        band = sd is not None and item.mode == "lines"
        if band:  # a line: its ±1 SD as a shaded band
            traces.append({
                "type": "scatter", "x": np.concatenate([x, x[::-1]]), "y": np.concatenate([y + sd, (y - sd)[::-1]]),
                "mode": "lines", "fill": "toself", "fillcolor": _with_alpha(colour, 0.18), "line": {"width": 0},
                "hoverinfo": "skip", "name": "± 1 SD", "legendgroup": item.name, "showlegend": False,
            })
        hover = f"{item.name}<br>{x_label}: %{{x:.4g}}<br>{y_label}: %{{y:.4g}}"
        if sd is not None:
            hover += " ± %{customdata:.2g} (1 SD)"
        traces.append(_drop_none({
            "type": "scatter", "x": x, "y": y, "mode": item.mode,
            "name": item.name + (" (band: ± 1 SD)" if band else " (bars: ± 1 SD)" if sd is not None else ""),
            "legendgroup": item.name,
            "line": _drop_none({"color": colour, "dash": item.dash}) if "lines" in item.mode else None,
            "marker": ({"color": colour, "size": 9 if item.symbol else 8, "symbol": item.symbol or "circle",
                        "line": {"width": 2, "color": colour}} if "markers" in item.mode else None),
            "error_y": ({"type": "data", "array": sd, "visible": True, "color": colour, "thickness": 1.2}
                        if sd is not None and not band else None),
            "customdata": sd,
            "hovertemplate": hover + "<extra></extra>",
        }))
    layout = _layout(traces, title=title, x_label=x_label, y_label=y_label, height=height)
    if log_y:
        layout["yaxis"].update({"type": "log", "dtick": 1, "exponentformat": "power"})
    if log_x:
        layout["xaxis"].update({"type": "log"})
    return _figure(traces, layout, checked=checked)


@cache
def _no_template() -> dict:
    """plotly's template "none" as the dict a checked figure carries (resolved once per process)."""
    import plotly.io as pio

    return pio.templates["none"].to_plotly_json()


def _figure(traces: list[dict], layout: dict, *, checked: bool) -> go.Figure:
    """The figure of these dicts: through plotly's property checks only when ``checked``."""
    if checked:
        return go.Figure(data=traces, layout=layout)
    return go.Figure(data=traces, layout={**layout, "template": _no_template()}, _validate=False)


def _layout(traces: list[dict], *, title, x_label: str, y_label: str, height: int) -> dict:
    """Title on top, legend under the plot (never over the title or the data)."""
    entries = sum(1 for trace in traces if trace.get("showlegend") is not False)
    return _drop_none({
        "title": {"text": title, "x": 0, "xanchor": "left"} if title else None,
        "height": height + (70 if entries > 1 else 0),
        "showlegend": entries > 1,
        "margin": {"l": 60, "r": 20, "t": 40 if title else 20, "b": 120 if entries > 1 else 50},
        "legend": {"orientation": "h", "yanchor": "top", "y": -0.28, "x": 0, "xanchor": "left"},
        "hovermode": "closest",
        # no plotly template: the page draws with Streamlit's chart theme, and a named template
        # is copied and checked into every figure (about half the cost of building one)
        "template": "none",
        "plot_bgcolor": "white",
        "xaxis": {"title": {"text": x_label}, "showgrid": True, "gridcolor": GRID_COLOUR, "zeroline": False},
        "yaxis": {"title": {"text": y_label}, "showgrid": True, "gridcolor": GRID_COLOUR, "zeroline": False},
    })


def _with_alpha(hex_colour: str, alpha: float) -> str:
    red, green, blue = (int(hex_colour[i : i + 2], 16) for i in (1, 3, 5))
    return f"rgba({red},{green},{blue},{alpha})"


def show_figure(figure: go.Figure, *, table: pd.DataFrame, file_stem: str, key: str) -> None:
    """Show a figure (PNG from its tool bar) with a CSV download of the numbers it plots."""
    st.plotly_chart(
        figure,
        width="stretch",
        key=f"{key}-chart",
        config={
            "displaylogo": False,
            "toImageButtonOptions": {"format": "png", "filename": file_stem, "scale": 2},
        },
    )
    st.download_button(
        "Download the plotted numbers (CSV)",
        data=table.to_csv(index=False).encode("utf-8"),
        file_name=f"{file_stem}.csv",
        mime="text/csv",
        key=f"{key}-csv",
    )


def show_chart(chart: Chart) -> None:
    """:func:`show_figure` of a :class:`Chart`."""
    show_figure(chart.figure, table=chart.table, file_stem=chart.file_stem, key=chart.key)


def bar_figure(
    x: np.ndarray,
    bars: dict[str, np.ndarray],
    *,
    x_label: str,
    y_label: str,
    title: str | None = None,
    bands: dict[str, float] | None = None,
    height: int = 300,
    checked: bool = False,
) -> go.Figure:
    """Grouped bars per x (e.g. residual per wavelength), with ± tolerance lines per series.

    The tolerance lines are named in the legend, not written on the plot: labels on the plot
    overprint each other (two equal tolerances) and the bars.  Built as :func:`line_figure`
    builds (``checked``)."""
    xs = np.asarray(x, dtype=float)
    step = float(np.min(np.diff(np.unique(xs)))) if np.unique(xs).size > 1 else 1.0
    span = [float(xs.min()) - step / 2, float(xs.max()) + step / 2] if xs.size else [0.0, 1.0]
    traces: list[dict] = []
    for index, (name, values) in enumerate(bars.items()):
        traces.append({
            "type": "bar", "x": xs, "y": np.asarray(values, dtype=float), "name": name,
            "marker": {"color": COLOURS[index % len(COLOURS)]},
            "hovertemplate": f"{name}<br>{x_label}: %{{x:.4g}}<br>{y_label}: %{{y:.3g}}<extra></extra>",
        })
    for index, name in enumerate(bars):
        if bands and name in bands:
            band = bands[name]
            traces.append({
                "type": "scatter", "x": [span[0], span[1], None, span[0], span[1]],
                "y": [band, band, None, -band, -band], "mode": "lines",
                "line": {"color": COLOURS[index % len(COLOURS)], "dash": "dot", "width": 1.5},
                "name": f"{name} tolerance ±{band:g} %", "hoverinfo": "skip",
            })
    layout = _layout(traces, title=title, x_label=x_label, y_label=y_label, height=height)
    layout["barmode"] = "group"
    if xs.size <= 20:  # a tick under every bar; a long spectrum keeps plotly's own ticks
        layout["xaxis"].update({"tickvals": xs, "ticktext": [f"{v:g}" for v in xs]})
    return _figure(traces, layout, checked=checked)


def target_series(name: str, x, y) -> Series:
    """A target: black open circles (never confused with a coloured prediction)."""
    return Series(name, np.asarray(x, dtype=float), np.asarray(y, dtype=float), mode="markers",
                  colour=TARGET_COLOUR, symbol="circle-open")
