"""The planned sO₂ series on the mixing sheet: a note, an inline SVG and CSV rows (layer 3).

The μa of the planned batch at every sO₂ level of its recipe (:func:`phantomlab.recipe.oxygenation.so2_series`),
one line per level, with the isosbestic points of the haemoglobin table marked as dashed
vertical lines: every level's μa meets there, so a measured spectrum that does not pass
through them points at a wrong total haemoglobin, not at a wrong sO₂.
"""

from __future__ import annotations

from html import escape

import numpy as np

from phantomlab.recipe.svgplot import nice_ticks

__all__ = ["so2_series_svg", "so2_series_html", "so2_series_csv_rows"]

#: Grey levels of the lines, darkest for the highest sO₂ (prints the same in black and white).
_GREYS = ("#000000", "#3a3a3a", "#666666", "#8c8c8c", "#b0b0b0")
_DASHES = ("", "6 2", "2 2", "8 3 2 3", "1 3")


def so2_series_svg(series, *, width: int = 680, height: int = 96) -> str:
    """SVG of μa against wavelength at every sO₂ level, isosbestic points dashed."""
    x0, y0 = 36.0, 14.0
    plot_w, plot_h = width - 120.0, height - 40.0
    wl = np.asarray(series.wavelength_nm, dtype=float)
    top = max(float(np.nanmax(level.mua_per_mm)) for level in series.levels)
    top = top * 1.1 if top > 0 else 1.0
    lo, hi = float(wl.min()), float(wl.max())
    if hi - lo < 1:
        lo, hi = lo - 10, hi + 10

    def sx(v):
        return x0 + (v - lo) / (hi - lo) * plot_w

    def sy(v):
        return y0 + plot_h - v / top * plot_h

    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" class="so2-series" width="{width}" height="{height}" '
             f'viewBox="0 0 {width} {height}" font-family="sans-serif" role="img" '
             'aria-label="predicted absorption at each planned oxygen saturation">',
             f'<rect x="{x0}" y="{y0}" width="{plot_w}" height="{plot_h}" fill="none" stroke="#444" stroke-width="0.6"/>',
             f'<text x="{x0 + plot_w / 2:.1f}" y="{y0 - 4:.1f}" text-anchor="middle" font-size="9">'
             'mua [1/mm] at each planned sO2</text>']
    for tick in nice_ticks(0.0, top, 4):
        y = sy(tick)
        parts.append(f'<line x1="{x0 - 3}" y1="{y:.1f}" x2="{x0}" y2="{y:.1f}" stroke="#444" stroke-width="0.6"/>'
                     f'<text x="{x0 - 5}" y="{y + 3:.1f}" text-anchor="end" font-size="8">{tick:g}</text>')
    for tick in nice_ticks(lo, hi, 5):
        x = sx(tick)
        parts.append(f'<line x1="{x:.1f}" y1="{y0 + plot_h}" x2="{x:.1f}" y2="{y0 + plot_h + 3}" stroke="#444" '
                     f'stroke-width="0.6"/><text x="{x:.1f}" y="{y0 + plot_h + 12}" text-anchor="middle" '
                     f'font-size="8">{tick:g}</text>')
    parts.append(f'<text x="{x0 + plot_w / 2:.1f}" y="{y0 + plot_h + 23}" text-anchor="middle" font-size="8">'
                 'wavelength [nm]</text>')
    for point in series.isosbestic_nm:
        x = sx(point)
        parts.append(f'<line class="isosbestic" x1="{x:.1f}" y1="{y0}" x2="{x:.1f}" y2="{y0 + plot_h}" '
                     f'stroke="#888" stroke-width="0.8" stroke-dasharray="3 2"/>'
                     f'<text x="{x + 2:.1f}" y="{y0 + 9:.1f}" font-size="7" fill="#555">{point:.0f}</text>')
    for index, level in enumerate(series.levels):
        grey, dash = _GREYS[index % len(_GREYS)], _DASHES[index % len(_DASHES)]
        style = f' stroke-dasharray="{dash}"' if dash else ""
        if wl.size > 1:
            line = " ".join(f"{sx(a):.1f},{sy(b):.1f}" for a, b in zip(wl, level.mua_per_mm))
            parts.append(f'<polyline class="level" points="{line}" fill="none" stroke="{grey}" stroke-width="1.2"{style}/>')
        else:
            parts.append(f'<circle class="level" cx="{sx(wl[0]):.1f}" cy="{sy(level.mua_per_mm[0]):.1f}" r="2.5" '
                         f'fill="{grey}"/>')
        ly = y0 + 8 + index * 11
        lx = x0 + plot_w + 14
        parts.append(f'<line x1="{lx}" y1="{ly}" x2="{lx + 22}" y2="{ly}" stroke="{grey}" stroke-width="1.2"{style}/>'
                     f'<text x="{lx + 26}" y="{ly + 3}" font-size="8">sO2 {100 * level.so2:.0f} %</text>')
    ly = y0 + 8 + len(series.levels) * 11
    parts.append(f'<line x1="{x0 + plot_w + 14}" y1="{ly}" x2="{x0 + plot_w + 36}" y2="{ly}" stroke="#888" '
                 f'stroke-width="0.8" stroke-dasharray="3 2"/><text x="{x0 + plot_w + 40}" y="{ly + 3}" '
                 'font-size="8">isosbestic</text>')
    parts.append("</svg>")
    return "".join(parts)


def so2_series_html(series, *, table_series=None) -> str:
    """The line under the predicted-optics table that says what the sO₂ columns and lines are.

    Parameters
    ----------
    series : So2Series
        On the dense grid (the plot).
    table_series : So2Series, optional
        On the target wavelengths (the table's columns; their SD, up to the figure given).
    """
    e = escape
    shown = table_series or series
    relative = max(float(np.nanmax(level.mua_sd_per_mm / level.mua_per_mm)) for level in shown.levels)
    return (f"<div class='small'>Planned sO₂ series: {e(series.blood_stock)} "
            f"{100 * series.blood_volume_fraction:.3g} % v/v = total haemoglobin {series.thb_um:.3g} µM (tetramer, "
            f"table {e(series.source)}), taken through sO₂ "
            + ", ".join(f"{100 * level.so2:.0f}" for level in series.levels)
            + f" % ({e(series.deoxygenation)} deoxygenation); μa at each level above, 1 SD up to "
            f"{100 * relative:.2g} %; isosbestic points in the band (dashed, all levels meet): "
            + (", ".join(f"{p:.0f}" for p in series.isosbestic_nm) or "none") + " nm.</div>")


def so2_series_csv_rows(series) -> list[list[str]]:
    """Rows ``so2_series,item,value,unit,tolerance,actual,note`` for the sheet CSV."""
    rows = [["so2_series", "blood_volume_fraction", f"{series.blood_volume_fraction:.6g}", "", "", "",
             series.blood_stock],
            ["so2_series", "thb", f"{series.thb_um:.6g}", "uM", "", "", "tetramer, 64500 g/mol"],
            ["so2_series", "isosbestic", " ".join(f"{p:.1f}" for p in series.isosbestic_nm), "nm", "", "",
             f"table {series.source}"]]
    for level in series.levels:
        for i, lam in enumerate(series.wavelength_nm):
            rows.append(["so2_series", f"mua at sO2 {100 * level.so2:g} % at {lam:g} nm",
                         f"{level.mua_per_mm[i]:.5g}", "1/mm", f"{level.mua_sd_per_mm[i]:.3g}", "", "SD"])
    return rows
