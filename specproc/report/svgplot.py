"""Geometry of small inline-SVG plots (the templates draw them; no markup here).

A panel maps data coordinates to pixels and returns plain dicts: tick positions and labels,
point positions with their hover text, polylines. The ``xy`` macro of
``templates/macros.html.j2`` turns one into an ``<svg>`` element; every text is escaped there.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

__all__ = ["nice_ticks", "xy_panel"]


def nice_ticks(lo: float, hi: float, n: int = 4) -> list[float]:
    """About ``n`` round tick values (1, 2, 2.5 or 5 times a power of ten) within [lo, hi]."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return [lo] if math.isfinite(lo) else []
    raw = (hi - lo) / n
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(s * power for s in (1, 2, 2.5, 5, 10) if s * power >= raw)
    ticks = []
    v = math.ceil(lo / step) * step
    while v <= hi + 1e-9 * step:
        ticks.append(round(v, 12))
        v += step
    return ticks


def _range(values: Sequence[float], extra: Sequence[float] = ()) -> tuple[float, float]:
    finite = [v for v in (*values, *extra) if math.isfinite(v)]
    if not finite:
        return 0.0, 1.0
    lo, hi = min(finite), max(finite)
    pad = 0.08 * (hi - lo) if hi > lo else max(abs(hi) * 0.1, 1.0)
    return lo - pad, hi + pad


def xy_panel(
    title: str,
    series: Sequence[dict[str, Any]],
    *,
    x_label: str = "",
    y_label: str = "",
    lines: Sequence[dict[str, Any]] = (),
    band: tuple[float, float] | None = None,
    x_ticks: Sequence[tuple[float, str]] | None = None,
    width: float = 300.0,
    height: float = 220.0,
) -> dict[str, Any]:
    """Geometry of one x-y panel.

    Parameters
    ----------
    title : str
        Panel title.
    series : sequence of dict
        ``{"points": [(x, y, hover text), ...], "colour": "#rrggbb", "join": bool}``;
        ``join`` draws a polyline through the points in order.
    x_label, y_label : str
        Axis labels.
    lines : sequence of dict
        Straight lines ``{"x": (x0, x1), "y": (y0, y1), "colour": ..., "dash": bool,
        "label": hover text}`` in data coordinates (a fit, the identity).
    band : (float, float), optional
        A horizontal band of y values (an acceptance range).
    x_ticks : sequence of (x, label), optional
        Ticks with text labels (categories or sessions); default numeric ticks.
    width, height : float
        Size in pixels.
    """
    xs = [p[0] for s in series for p in s["points"]]
    ys = [p[1] for s in series for p in s["points"]]
    line_x = [v for ln in lines for v in ln["x"]]
    line_y = [v for ln in lines for v in ln["y"]]
    x0, x1 = _range(xs, line_x)
    y0, y1 = _range(ys, (*line_y, *(band or ())))
    left, right, top, bottom = 52.0, width - 10.0, 26.0, height - 40.0

    def px(x: float) -> str:
        return f"{left + (x - x0) / (x1 - x0) * (right - left):.1f}"

    def py(y: float) -> str:
        return f"{bottom - (y - y0) / (y1 - y0) * (bottom - top):.1f}"

    out_series = []
    for s in series:
        pts = [(x, y, text) for x, y, text in s["points"] if math.isfinite(x) and math.isfinite(y)]
        out_series.append({
            "colour": s.get("colour", "#283593"),
            "points": [{"x": px(x), "y": py(y), "label": text} for x, y, text in pts],
            "path": " ".join(f"{px(x)},{py(y)}" for x, y, _ in pts) if s.get("join") else "",
        })
    out_lines = [{"x1": px(ln["x"][0]), "y1": py(ln["y"][0]), "x2": px(ln["x"][1]),
                  "y2": py(ln["y"][1]), "colour": ln.get("colour", "#1f2430"),
                  "dash": bool(ln.get("dash")), "label": ln.get("label", "")} for ln in lines]
    ticks_x = ([{"x": px(x), "label": label} for x, label in x_ticks] if x_ticks is not None
               else [{"x": px(t), "label": f"{t:.6g}"} for t in nice_ticks(x0, x1)])
    ticks_y = [{"y": py(t), "label": f"{t:.6g}"} for t in nice_ticks(y0, y1)]
    return {
        "title": title, "x_label": x_label, "y_label": y_label, "width": width,
        "height": height, "plot": (left, right, top, bottom), "series": out_series,
        "lines": out_lines, "ticks_x": ticks_x, "ticks_y": ticks_y,
        "band": None if band is None else {
            "y": py(band[1]), "h": f"{float(py(band[0])) - float(py(band[1])):.1f}"},
    }
