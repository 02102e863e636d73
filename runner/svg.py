"""Hand-written SVG pictures for the HTML report: the network in tier bands and a line
chart of the score over search steps. Every picture carries its own legend.

All text goes through :func:`esc`; coordinates are rounded to 0.1 so the same inputs give
the same bytes. Ids inside a picture are prefixed with the picture's id, so several
pictures can share one page. The palette is our own (muted paper, slate and pine).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from html import escape
from itertools import pairwise

from runner.layout import Band

PAPER = "#fbfaf6"
INK = "#2b3a42"
MUTED = "#6b7a80"
BANDS = ("#edf2ee", "#f5f0e7")
NODE_FILL = "#ffffff"
NODE_STROKE = "#56767b"
SERIES = ("#3d6f86", "#b2773f", "#5f8a55", "#8a5f86", "#a05a5a", "#4f7f7a")


@dataclass(frozen=True)
class Style:
    colour: str
    width: float
    dash: str | None
    legend: str


# Edge kinds: colour, width, dash pattern, legend text.
STYLES: dict[str, Style] = {
    "learned": Style("#4f6470", 1.6, None, "learned edge"),
    "required": Style("#2e5e4e", 2.6, "9 3", "required by the spec"),
    "forbidden": Style("#b98b7c", 1.0, "1.5 4", "forbidden by the spec (not an edge)"),
    "common": Style("#97a3a8", 1.6, None, "in both runs"),
    "added": Style("#3f8a5f", 2.4, None, "added in B"),
    "removed": Style("#b8603f", 2.4, "7 4", "removed in B (was in A)"),
    "reversed": Style("#6f5fa8", 2.4, "2 3", "reversed in B (drawn as in B)"),
}

DIFF_KINDS = ("common", "added", "removed", "reversed")
NODE_H = 30.0
BAND_H = 96.0
GUTTER = 128.0
TOP = 40.0  # room above the first band for arcs between its variables
GAP = 34.0
LEGEND_ROW = 22.0


def esc(text: object) -> str:
    """Text or attribute value escaped for HTML and SVG (quotes included)."""
    return escape(str(text), quote=True)


def _n(x: float) -> str:
    value = round(x, 1)
    return str(int(value)) if value == int(value) else f"{value:.1f}"


def node_width(name: str) -> float:
    return max(64.0, 7.3 * len(name) + 22.0)


@dataclass(frozen=True)
class DrawnEdge:
    source: str
    target: str
    kind: str
    title: str
    confidence: float | None = None


def _markers(fig: str, kinds: Sequence[str]) -> str:
    out = []
    for kind in kinds:
        colour = STYLES[kind].colour
        out.append(f'<marker id="{fig}-arrow-{kind}" viewBox="0 0 10 10" refX="9" refY="5" '
                   f'markerWidth="9" markerHeight="9" markerUnits="userSpaceOnUse" '
                   f'orient="auto-start-reverse"><path d="M0 0 L10 5 L0 10 z" '
                   f'fill="{colour}"/></marker>')
    return "<defs>" + "".join(out) + "</defs>"


def _positions(bands: Sequence[Band]) -> tuple[dict[str, tuple[float, float]], float]:
    slot = {b.label: max(node_width(n) for n in b.members) + GAP for b in bands}
    inner = max([860.0] + [slot[b.label] * len(b.members) for b in bands])
    pos: dict[str, tuple[float, float]] = {}
    for i, band in enumerate(bands):
        y = TOP + i * BAND_H + BAND_H / 2
        step = inner / len(band.members)
        for k, name in enumerate(band.members):
            pos[name] = (GUTTER + step * (k + 0.5), y)
    return pos, GUTTER + inner + 16.0


def _waypoints(a: tuple[float, float], b: tuple[float, float],
               rows: Sequence[tuple[float, Sequence[tuple[float, float]]]]
               ) -> list[tuple[float, float]]:
    """Where an edge crosses the bands strictly between its ends: on the straight line
    when that misses every node there, else in the gap between nodes nearest to it.
    ``rows`` lists each band's centre y and its nodes' (x, half width)."""
    (x1, y1), (x2, y2) = a, b
    lo, hi = min(y1, y2), max(y1, y2)
    points = []
    for y, nodes in sorted(rows, key=lambda r: r[0], reverse=y2 < y1):
        if not lo + 1e-9 < y < hi - 1e-9:
            continue
        x = x1 + (x2 - x1) * (y - y1) / (y2 - y1)
        if any(abs(x - nx) < hw + 8.0 for nx, hw in nodes):
            xs = sorted(nodes)
            gaps = [xs[0][0] - xs[0][1] - 14.0, xs[-1][0] + xs[-1][1] + 14.0]
            gaps += [(p[0] + p[1] + q[0] - q[1]) / 2 for p, q in pairwise(xs)]
            x = min(gaps, key=lambda g: (abs(g - x), g))
        points.append((x, y))
    return points


def _edge_path(a: tuple[float, float], b: tuple[float, float],
               via: Sequence[tuple[float, float]] = ()) -> str:
    """A curve from node ``a`` to node ``b``: an arc over the band for a same-band pair,
    else vertical-tangent cubic pieces through the waypoints ``via``."""
    (x1, y1), (x2, y2) = a, b
    half = NODE_H / 2
    if abs(y1 - y2) < 1e-9:  # same band: an arc over the band
        lift = min(26.0 + 0.12 * abs(x2 - x1), 0.5 * BAND_H)
        sy, ty = y1 - half, y2 - half - 2
        return (f"M{_n(x1)} {_n(sy)} C{_n(x1)} {_n(sy - lift)} {_n(x2)} {_n(ty - lift)} "
                f"{_n(x2)} {_n(ty)}")
    down = y2 > y1
    sy = y1 + half if down else y1 - half
    ty = y2 - half - 2 if down else y2 + half + 2
    points = [(x1, sy), *via, (x2, ty)]
    pieces = [f"M{_n(x1)} {_n(sy)}"]
    for (px, py), (qx, qy) in pairwise(points):
        mid = (py + qy) / 2
        pieces.append(f"C{_n(px)} {_n(mid)} {_n(qx)} {_n(mid)} {_n(qx)} {_n(qy)}")
    return " ".join(pieces)


def _legend(fig: str, entries: Sequence[tuple[str, str]], top: float,
            width: float) -> tuple[str, float]:
    """Legend rows: (kind or 'node' or 'confidence', text)."""
    parts = [f'<g class="legend" transform="translate(0 {_n(top)})">',
             '<text x="16" y="14" class="legend-title">Legend</text>']
    x, y = 80.0, 0.0
    for kind, text in entries:
        item_w = 56 + 6.6 * len(text) + 24
        if x + item_w > width:
            x, y = 80.0, y + LEGEND_ROW
        if kind == "node":
            parts.append(f'<rect x="{_n(x)}" y="{_n(y + 3)}" width="36" height="14" rx="6" '
                         f'fill="{NODE_FILL}" stroke="{NODE_STROKE}"/>')
        elif kind == "band":
            parts.append(f'<rect x="{_n(x)}" y="{_n(y + 3)}" width="36" height="14" '
                         f'fill="{BANDS[0]}" stroke="{MUTED}" stroke-width="0.5"/>')
        elif kind == "confidence":
            for k, w in enumerate((1.4, 3.0, 5.0)):
                parts.append(f'<line x1="{_n(x + 12 * k)}" y1="{_n(y + 16)}" '
                             f'x2="{_n(x + 12 * k + 9)}" y2="{_n(y + 4)}" stroke="'
                             f'{STYLES["learned"].colour}" stroke-width="{w}"/>')
        else:
            s = STYLES[kind]
            dash = f' stroke-dasharray="{s.dash}"' if s.dash else ""
            parts.append(f'<line x1="{_n(x)}" y1="{_n(y + 10)}" x2="{_n(x + 36)}" '
                         f'y2="{_n(y + 10)}" stroke="{s.colour}" stroke-width="{s.width}"'
                         f'{dash} marker-end="url(#{fig}-arrow-{kind})"/>')
        parts.append(f'<text x="{_n(x + 44)}" y="{_n(y + 14)}">{esc(text)}</text>')
        x += item_w
    parts.append("</g>")
    return "".join(parts), y + LEGEND_ROW


def network_svg(fig: str, bands: Sequence[Band], index: dict[str, int],
                edges: Sequence[DrawnEdge], legend: Sequence[tuple[str, str]],
                caption: str) -> str:
    """The network in tier bands. Nodes are ``<g class="node" id="{fig}-node-{i}">``,
    edges ``<g class="edge edge-{kind}" id="{fig}-edge-{i}-{j}">`` (``diff-{kind}`` for
    the kinds of an overlay; pairs that are not edges, such as forbidden ones, get class
    ``pair pair-forbidden`` and id ``{fig}-pair-{i}-{j}``)."""
    pos, width = _positions(bands)
    rows = [(pos[b.members[0]][1], [(pos[n][0], node_width(n) / 2) for n in b.members])
            for b in bands if b.members]
    kinds = sorted({e.kind for e in edges} | {k for k, _ in legend if k in STYLES})
    body_h = TOP + len(bands) * BAND_H + 10
    legend_svg, legend_h = _legend(fig, legend, body_h + 6, width)
    height = body_h + 6 + legend_h + 10
    out = [f'<svg class="figure" id="{fig}" '
           f'viewBox="0 0 {_n(width)} {_n(height)}" width="{_n(width)}" height="{_n(height)}" '
           f'role="img" aria-label="{esc(caption)}">', f"<title>{esc(caption)}</title>",
           _markers(fig, kinds), f'<rect width="100%" height="100%" fill="{PAPER}"/>']
    for i, band in enumerate(bands):
        top = TOP + i * BAND_H
        out.append(f'<g class="band"><rect x="8" y="{_n(top + 3)}" width="{_n(width - 16)}" '
                   f'height="{_n(BAND_H - 6)}" rx="8" fill="{BANDS[i % 2]}"/>'
                   f'<text x="20" y="{_n(top + BAND_H / 2 + 4)}" class="band-label">'
                   f"{esc(band.label)}</text></g>")
    for e in edges:
        if e.source not in pos or e.target not in pos:
            continue
        s = STYLES[e.kind]
        width_px = s.width if e.confidence is None else 1.0 + 4.0 * e.confidence
        dash = f' stroke-dasharray="{s.dash}"' if s.dash else ""
        opacity = "" if e.confidence is None else \
            f' stroke-opacity="{0.35 + 0.65 * e.confidence:.2f}"'
        cls = "pair" if e.kind == "forbidden" else "edge"
        variant = f"diff-{e.kind}" if e.kind in DIFF_KINDS else f"{cls}-{e.kind}"
        ident = f"{fig}-{cls}-{index[e.source]}-{index[e.target]}"
        path = _edge_path(pos[e.source], pos[e.target],
                          _waypoints(pos[e.source], pos[e.target], rows))
        out.append(f'<g class="{cls} {variant}" id="{ident}" data-from="{esc(e.source)}" '
                   f'data-to="{esc(e.target)}"><title>{esc(e.title)}</title>'
                   f'<path d="{path}" fill="none" stroke="{s.colour}" '
                   f'stroke-width="{width_px:.2f}"{dash}{opacity} '
                   f'marker-end="url(#{fig}-arrow-{e.kind})"/>')
        if e.confidence is not None:
            (x1, y1), (x2, y2) = pos[e.source], pos[e.target]
            out.append(f'<text class="edge-label" x="{_n((x1 + x2) / 2 + 4)}" '
                       f'y="{_n((y1 + y2) / 2 - 3)}">{e.confidence:.0%}</text>')
        out.append("</g>")
    for name, (x, y) in pos.items():
        w = node_width(name)
        out.append(f'<g class="node" id="{fig}-node-{index[name]}" data-name="{esc(name)}">'
                   f'<rect x="{_n(x - w / 2)}" y="{_n(y - NODE_H / 2)}" width="{_n(w)}" '
                   f'height="{_n(NODE_H)}" rx="9" fill="{NODE_FILL}" stroke="{NODE_STROKE}" '
                   f'stroke-width="1.4"/><text x="{_n(x)}" y="{_n(y + 4.5)}" '
                   f'text-anchor="middle" class="node-label">{esc(name)}</text></g>')
    out.append(legend_svg)
    out.append("</svg>")
    return "\n".join(out)


# --------------------------------------------------------------------------- line chart


def nice_ticks(lo: float, hi: float, count: int = 5) -> list[float]:
    """Round tick values covering [lo, hi] (steps of 1, 2 or 5 times a power of ten)."""
    if not math.isfinite(lo) or not math.isfinite(hi):
        return []
    if hi <= lo:
        hi = lo + 1.0
    raw = (hi - lo) / max(count, 1)
    power = 10 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1, 2, 5, 10) if m * power >= raw)
    first = math.floor(lo / step) * step
    ticks = [round(first, 10)]
    while ticks[-1] < hi - step * 1e-9:
        ticks.append(round(first + len(ticks) * step, 10))
    return ticks


def _tick_text(value: float) -> str:
    if value != 0 and (abs(value) >= 1e6 or abs(value) < 1e-3):
        return f"{value:.3g}"
    return f"{value:,.10g}"


@dataclass(frozen=True)
class Series:
    label: str
    points: tuple[tuple[float, float], ...]
    dashed: bool = False
    colour: str | None = None  # None: the next colour of SERIES


def _series_colours(series: Sequence[Series]) -> list[str]:
    out, k = [], 0
    for s in series:
        if s.colour is not None:
            out.append(s.colour)
        else:
            out.append(SERIES[k % len(SERIES)])
            k += 1
    return out


def line_chart_svg(fig: str, series: Sequence[Series], x_label: str, y_label: str,
                   caption: str, width: float = 860.0, height: float = 330.0) -> str:
    """A line chart with axes, round ticks and a legend; one polyline per series
    (``<polyline class="series" ...>``)."""
    left, right, top, bottom = 92.0, 18.0, 16.0, 50.0
    pts = [p for s in series for p in s.points]
    legend_rows = 1 + len(series) // 4
    full_h = height + legend_rows * LEGEND_ROW + 8
    out = [f'<svg class="figure" id="{fig}" '
           f'viewBox="0 0 {_n(width)} {_n(full_h)}" width="{_n(width)}" '
           f'height="{_n(full_h)}" role="img" aria-label="{esc(caption)}">',
           f"<title>{esc(caption)}</title>", f'<rect width="100%" height="100%" fill="{PAPER}"/>']
    if not pts:
        out.append(f'<text x="20" y="40">{esc("no moves were recorded")}</text></svg>')
        return "\n".join(out)
    xs, ys = [p[0] for p in pts], [p[1] for p in pts]
    xt, yt = nice_ticks(min(xs), max(xs)), nice_ticks(min(ys), max(ys))
    x0, x1, y0, y1 = xt[0], xt[-1], yt[0], yt[-1]
    pw, ph = width - left - right, height - top - bottom

    def sx(x: float) -> float:
        return left + (x - x0) / ((x1 - x0) or 1.0) * pw

    def sy(y: float) -> float:
        return top + ph - (y - y0) / ((y1 - y0) or 1.0) * ph

    out.append(f'<rect x="{_n(left)}" y="{_n(top)}" width="{_n(pw)}" height="{_n(ph)}" '
               f'fill="#ffffff" stroke="#d9dcd6"/>')
    for t in yt:
        out.append(f'<line x1="{_n(left)}" x2="{_n(left + pw)}" y1="{_n(sy(t))}" '
                   f'y2="{_n(sy(t))}" stroke="#e7e9e4"/><text x="{_n(left - 6)}" '
                   f'y="{_n(sy(t) + 4)}" text-anchor="end" class="tick">'
                   f"{esc(_tick_text(t))}</text>")
    for t in xt:
        out.append(f'<line x1="{_n(sx(t))}" x2="{_n(sx(t))}" y1="{_n(top + ph)}" '
                   f'y2="{_n(top + ph + 4)}" stroke="{MUTED}"/><text x="{_n(sx(t))}" '
                   f'y="{_n(top + ph + 18)}" text-anchor="middle" class="tick">'
                   f"{esc(_tick_text(t))}</text>")
    out.append(f'<text x="{_n(left + pw / 2)}" y="{_n(height - 8)}" text-anchor="middle" '
               f'class="axis-label">{esc(x_label)}</text>')
    out.append(f'<text transform="translate(16 {_n(top + ph / 2)}) rotate(-90)" '
               f'text-anchor="middle" class="axis-label">{esc(y_label)}</text>')
    colours = _series_colours(series)
    for s, colour in zip(series, colours, strict=True):
        dash = ' stroke-dasharray="3 3"' if s.dashed else ""
        points = " ".join(f"{_n(sx(x))},{_n(sy(y))}" for x, y in s.points)
        out.append(f'<polyline class="series" points="{points}" fill="none" '
                   f'stroke="{colour}" stroke-width="2"{dash}><title>{esc(s.label)}</title>'
                   f"</polyline>")
    out.append(f'<g class="legend" transform="translate(0 {_n(height + 2)})">'
               f'<text x="16" y="14" class="legend-title">Legend</text>')
    x, y = 80.0, 0.0
    shown: set[str] = set()
    for s, colour in zip(series, colours, strict=True):
        if s.label in shown:
            continue
        shown.add(s.label)
        item_w = 48 + 6.6 * len(s.label) + 22
        if x + item_w > width:
            x, y = 80.0, y + LEGEND_ROW
        dash = ' stroke-dasharray="3 3"' if s.dashed else ""
        out.append(f'<line x1="{_n(x)}" y1="{_n(y + 10)}" x2="{_n(x + 36)}" y2="{_n(y + 10)}" '
                   f'stroke="{colour}" stroke-width="2"{dash}/>'
                   f'<text x="{_n(x + 44)}" y="{_n(y + 14)}">{esc(s.label)}</text>')
        x += item_w
    out.append("</g></svg>")
    return "\n".join(out)
