"""A small inline SVG of predicted against target spectra (no browser or plotting library).

Two panels, μa and μs′ against wavelength: the prediction as a line with a ±1 SD band, the
target as open circles (or a dashed line when it has many points).  Plain SVG 1.1 elements
only, so the sheet prints the same everywhere.
"""

from __future__ import annotations

import math
from html import escape

import numpy as np

__all__ = ["spectra_svg", "nice_ticks"]


def nice_ticks(low: float, high: float, count: int = 4) -> list[float]:
    """About ``count`` round tick values covering [low, high] (1-2-5 steps)."""
    if not (math.isfinite(low) and math.isfinite(high)) or high <= low:
        return [low]
    raw = (high - low) / max(count, 1)
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1, 2, 2.5, 5, 10) if m * power >= raw)
    start = math.ceil(low / step - 1e-9) * step
    ticks = []
    value = start
    while value <= high + 1e-9 * step:
        ticks.append(round(value, 12))
        value += step
    return ticks


def _panel(x0, y0, width, height, title, unit, wl, pred, sd, twl, tval) -> list[str]:
    parts = [f'<g class="panel"><text x="{x0 + width / 2:.1f}" y="{y0 - 6:.1f}" '
             f'text-anchor="middle" font-size="10">{escape(title)} [{escape(unit)}]</text>']
    finite_t = tval[np.isfinite(tval)]
    top = np.nanmax(np.concatenate([pred + sd, finite_t])) if finite_t.size else np.nanmax(pred + sd)
    top = float(top) * 1.1 if top > 0 else 1.0
    lo_x, hi_x = float(min(wl.min(), twl.min())), float(max(wl.max(), twl.max()))
    if hi_x - lo_x < 1:
        lo_x, hi_x = lo_x - 10, hi_x + 10

    def sx(v):
        return x0 + (v - lo_x) / (hi_x - lo_x) * width

    def sy(v):
        return y0 + height - v / top * height

    parts.append(f'<rect x="{x0}" y="{y0}" width="{width}" height="{height}" fill="none" '
                 'stroke="#444" stroke-width="0.6"/>')
    for tick in nice_ticks(0.0, top, 4):
        y = sy(tick)
        parts.append(f'<line x1="{x0 - 3}" y1="{y:.1f}" x2="{x0}" y2="{y:.1f}" stroke="#444" stroke-width="0.6"/>'
                     f'<text x="{x0 - 5}" y="{y + 3:.1f}" text-anchor="end" font-size="8">{tick:g}</text>')
    for tick in nice_ticks(lo_x, hi_x, 4):
        x = sx(tick)
        parts.append(f'<line x1="{x:.1f}" y1="{y0 + height}" x2="{x:.1f}" y2="{y0 + height + 3}" '
                     f'stroke="#444" stroke-width="0.6"/><text x="{x:.1f}" y="{y0 + height + 12}" '
                     f'text-anchor="middle" font-size="8">{tick:g}</text>')
    parts.append(f'<text x="{x0 + width / 2:.1f}" y="{y0 + height + 23}" text-anchor="middle" '
                 'font-size="8">wavelength [nm]</text>')
    if wl.size > 1:
        upper = " ".join(f"{sx(a):.1f},{sy(b):.1f}" for a, b in zip(wl, pred + sd))
        lower = " ".join(f"{sx(a):.1f},{sy(max(b, 0.0)):.1f}" for a, b in zip(wl[::-1], (pred - sd)[::-1]))
        parts.append(f'<polygon class="sd-band" points="{upper} {lower}" fill="#bbb" fill-opacity="0.5" stroke="none"/>')
        line = " ".join(f"{sx(a):.1f},{sy(b):.1f}" for a, b in zip(wl, pred))
        parts.append(f'<polyline class="predicted" points="{line}" fill="none" stroke="#000" stroke-width="1.2"/>')
    else:
        parts.append(f'<circle class="predicted" cx="{sx(wl[0]):.1f}" cy="{sy(pred[0]):.1f}" r="2.5" fill="#000"/>')
    has = np.isfinite(tval)
    if np.count_nonzero(has) > 30:
        line = " ".join(f"{sx(a):.1f},{sy(b):.1f}" for a, b in zip(twl[has], tval[has]))
        parts.append(f'<polyline class="target" points="{line}" fill="none" stroke="#000" '
                     'stroke-width="1" stroke-dasharray="4 3"/>')
    else:
        for a, b in zip(twl[has], tval[has]):
            parts.append(f'<circle class="target" cx="{sx(a):.1f}" cy="{sy(b):.1f}" r="3" fill="#fff" '
                         'stroke="#000" stroke-width="1"/>')
    parts.append("</g>")
    return parts


def spectra_svg(plan, *, width: int = 680, height: int = 170, quantities=("mua", "musp")) -> str:
    """SVG markup of predicted (line, ±1 SD band) against target (circles) μa and μs′.

    ``quantities`` chooses the panels (``"mua"``, ``"musp"``), side by side in that order.
    """
    curve = plan.curve if plan.curve is not None else plan.predicted
    target = plan.target
    panels = {
        "mua": ("mua", curve.mua_per_mm, curve.mua_sd_per_mm, target.mua_per_mm),
        "musp": ("musp", curve.musp_per_mm, curve.musp_sd_per_mm, target.musp_per_mm),
    }
    count = len(quantities)
    panel_w = (width - 55 * count) / count
    panel_h = height - 44
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" class="spectra" width="{width}" height="{height}" '
             f'viewBox="0 0 {width} {height}" font-family="sans-serif" role="img" '
             'aria-label="predicted and target absorption and reduced scattering spectra">']
    for index, (title, pred, sd, tval) in enumerate(panels[q] for q in quantities):
        x0 = 45 + index * (panel_w + 55)
        parts += _panel(x0, 16, panel_w, panel_h, title, "1/mm", curve.wavelength_nm, pred, sd,
                        target.wavelength_nm, tval)
    parts.append("</svg>")
    return "".join(parts)
