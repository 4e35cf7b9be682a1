"""Inline SVG charts for the run report: bars with both axes, tick labels and optional marker lines.

No scripts, no fonts or images fetched: every chart is plain SVG inside the HTML page.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass

import numpy as np


def _e(value: object) -> str:
    return html.escape(str(value))


def thousands(value: float) -> str:
    """12345 -> '12,345'; 0.5 -> '0.5' (whole numbers get separators, others 3 significant digits)."""
    if float(value).is_integer():
        return f"{int(value):,}"
    return f"{value:,.3g}"


@dataclass
class Marker:
    """A vertical line across a chart at an x value, with a label (e.g. a threshold)."""

    x: float
    label: str
    colour: str = "#b00020"


def _nice_ticks(top: float, count: int = 5) -> list[float]:
    if top <= 0:
        return [0.0]
    raw = top / count
    magnitude = 10 ** math.floor(math.log10(raw))
    step = next(m * magnitude for m in (1, 2, 5, 10) if m * magnitude >= raw)
    return [k * step for k in range(int(top // step) + 1)]


def histogram_chart(edges: np.ndarray, counts: np.ndarray, title: str, x_label: str, y_label: str, *,
                    log_scale: bool = False, markers: list[Marker] | tuple[Marker, ...] = (),
                    x_format: str = "{:.0f}", width: int = 640,
                    x_ticks: list[tuple[float, str]] | None = None) -> str:
    """Bars between ``edges`` (len(counts) + 1 of them) with a y axis, x ticks and marker lines.

    The SVG scales down to its container's width (``max-width: 100%``), so it never overflows a
    narrow page.
    """
    height, left, right, top_pad, bottom = 270, 62, 16, 30, 48
    plot_w, plot_h = width - left - right, height - top_pad - bottom
    counts = np.asarray(counts, dtype=float)
    edges = np.asarray(edges, dtype=float)
    lo, hi = (float(edges[0]), float(edges[-1])) if len(edges) > 1 else (0.0, 1.0)
    span = (hi - lo) or 1.0

    def sx(x: float) -> float:
        return left + plot_w * (x - lo) / span

    shown = np.log10(counts + 1) if log_scale else counts
    top = float(shown.max()) if len(shown) and shown.max() > 0 else 1.0
    if log_scale:
        ticks = [float(10 ** k) for k in range(int(math.floor(top)) + 1)]
        tick_pos = [math.log10(t + 1) for t in ticks]
    else:
        ticks = _nice_ticks(top)
        tick_pos = ticks
    top = max(top, max(tick_pos, default=0.0)) or 1.0

    def sy(v: float) -> float:
        return top_pad + plot_h * (1 - v / top)

    parts = [f'<svg role="img" aria-label="{_e(title)}" viewBox="0 0 {width} {height}" width="{width}" '
             f'height="{height}" style="max-width:100%;height:auto" xmlns="http://www.w3.org/2000/svg">',
             f"<title>{_e(title)}</title>"]
    for t, p in zip(ticks, tick_pos):
        y = sy(p)
        parts.append(f'<line x1="{left}" y1="{y:.1f}" x2="{width - right}" y2="{y:.1f}" stroke="#ddd"/>'
                     f'<text x="{left - 6}" y="{y + 4:.1f}" font-size="11" text-anchor="end">{thousands(t)}</text>')
    for k, (value, s) in enumerate(zip(counts, shown)):
        x0, x1 = sx(edges[k]), sx(edges[k + 1])
        y = sy(float(s))
        label = f"{x_format.format(edges[k])} to {x_format.format(edges[k + 1])}: {thousands(value)}"
        parts.append(f'<rect x="{x0 + 0.5:.1f}" y="{y:.1f}" width="{max(x1 - x0 - 1, 0.5):.1f}" '
                     f'height="{top_pad + plot_h - y:.1f}" fill="#3a5a40"><title>{_e(label)}</title></rect>')
    base = top_pad + plot_h
    parts.append(f'<line x1="{left}" y1="{base}" x2="{width - right}" y2="{base}" stroke="#333"/>'
                 f'<line x1="{left}" y1="{top_pad}" x2="{left}" y2="{base}" stroke="#333"/>')
    tick_marks = x_ticks if x_ticks is not None else [(x, x_format.format(x)) for x in np.linspace(lo, hi, 7)]
    for x, text in tick_marks:
        parts.append(f'<line x1="{sx(x):.1f}" y1="{base}" x2="{sx(x):.1f}" y2="{base + 4}" stroke="#333"/>'
                     f'<text x="{sx(x):.1f}" y="{base + 16}" font-size="11" text-anchor="middle">'
                     f"{_e(text)}</text>")
    for k, m in enumerate(markers):
        if lo <= m.x <= hi:
            x = sx(m.x)
            # labels above the plot, the first to the right of its line, the next to the left
            side, anchor = (x + 4, "start") if k % 2 == 0 else (x - 4, "end")
            parts.append(f'<line x1="{x:.1f}" y1="{top_pad - 4}" x2="{x:.1f}" y2="{base}" stroke="{m.colour}" '
                         f'stroke-width="2" stroke-dasharray="5 3"/><text x="{side:.1f}" y="{top_pad - 8}" '
                         f'font-size="11" text-anchor="{anchor}" fill="{m.colour}">{_e(m.label)}</text>')
    parts.append(f'<text x="{left + plot_w / 2:.1f}" y="{height - 8}" font-size="12" text-anchor="middle">'
                 f"{_e(x_label)}</text>"
                 f'<text x="14" y="{top_pad + plot_h / 2:.1f}" font-size="12" text-anchor="middle" '
                 f'transform="rotate(-90 14 {top_pad + plot_h / 2:.1f})">{_e(y_label)}'
                 f'{" (log scale)" if log_scale else ""}</text></svg>')
    return "".join(parts)


def category_chart(labels: list[str], counts: list[float], title: str, x_label: str, y_label: str, *,
                   log_scale: bool = False, width: int = 640) -> str:
    """Bars for categories (e.g. cluster sizes): one bar per label, the labels as x ticks."""
    n = max(len(labels), 1)
    step = max(1, n // 12)
    ticks = [(k + 0.5, label) for k, label in enumerate(labels) if k % step == 0]
    return histogram_chart(np.arange(n + 1, dtype=float), np.asarray(counts, float), title, x_label, y_label,
                           log_scale=log_scale, width=width, x_ticks=ticks)
