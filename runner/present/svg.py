"""Hand-written SVG pictures for the HTML report: the network in tier bands and a line
chart of the score over search steps. Every picture carries its own legend, listing only
what the picture draws.

All text goes through :func:`esc`; coordinates are rounded to 0.1 so the same inputs give
the same bytes. Ids inside a picture are prefixed with the picture's id, so several
pictures can share one page. The palette is our own (muted paper, slate and pine).

How the network is drawn (:func:`network_geometry`): each edge leaves its source and
enters its target through a port of its own on the node's border (ports spread along the
side, ordered by where the edge heads, so no two arrowheads or start points meet); it
runs straight for :data:`CLEAR` pixels out of and into its nodes, crosses the gaps
between bands as a curve, and passes each band between its ends vertically through a gap
between that band's nodes. Curves therefore never come closer than :data:`CLEAR` to a
node box they do not end at: the gaps between bands hold no nodes, and a band is crossed
only where its boxes are at least that far away.
"""

from __future__ import annotations

import math
from collections import defaultdict
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from html import escape
from itertools import pairwise

from runner.present.layout import Band

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


# Edge kinds: colour, width, dash pattern, legend text; the legend lists them in this order.
STYLES: dict[str, Style] = {
    "learned": Style("#4f6470", 1.6, None, "learned edge"),
    "required": Style("#2e5e4e", 2.6, "9 3", "required by the spec"),
    "forbidden": Style("#b98b7c", 1.0, "1.5 4", "forbidden by the spec (not an edge)"),
    "common": Style("#97a3a8", 1.6, None, "in both runs"),
    "added": Style("#3f8a5f", 2.4, None, "added in B"),
    "removed": Style("#b8603f", 2.4, "7 4", "removed in B (was in A)"),
    "reversed": Style("#6f5fa8", 2.4, "2 3", "reversed in B (drawn as in B)"),
    "stable": Style("#2e5e4e", 1.6, None, "stable core: in every combination"),
    "varying": Style("#4f6470", 1.6, "6 3", "in some combinations only"),
}

DIFF_KINDS = ("common", "added", "removed", "reversed")
NODE_H = 30.0
BAND_H = 96.0
GUTTER = 128.0  # least room left of the bands' nodes for the band labels
TOP = 40.0  # room above the first band for arcs between its variables
GAP = 34.0  # least horizontal gap between two nodes of a band
CLEAR = 8.0  # least distance from a curve to any node box it does not end at
PORT_GAP = 14.0  # least distance between two edge ends on one side of a node
TIP_GAP = 2.0  # between an arrow's tip and its target's border
ARROW = 9.0  # arrowhead length and width
LANE = 6.0  # distance between edges passing through one gap of a band
OUTER = 28.0  # width of the stretch left of a band's first node (and right of its last)
LEGEND_ROW = 22.0
#: Highest control point of an arc over a band: its peak (3/4 of the lift) stays CLEAR
#: below the band above.
MAX_LIFT = (BAND_H - NODE_H - 2 * CLEAR) / 0.75 - 1.0

Point = tuple[float, float]


def esc(text: object) -> str:
    """Text or attribute value escaped for HTML and SVG (quotes included)."""
    return escape(str(text), quote=True)


def _n(x: float) -> str:
    value = round(x, 1)
    return str(int(value)) if value == int(value) else f"{value:.1f}"


def node_width(name: str) -> float:
    """The width a node needs for its name."""
    return max(64.0, 7.3 * len(name) + 22.0)


def label_width(text: str) -> float:
    """The width a band label needs (12 px text)."""
    return 6.6 * len(text)


@dataclass(frozen=True)
class DrawnEdge:
    source: str
    target: str
    kind: str
    title: str
    confidence: float | None = None


@dataclass(frozen=True)
class Box:
    """A node's box: centre and width (height :data:`NODE_H`)."""

    x: float
    y: float
    width: float

    @property
    def half(self) -> float:
        return self.width / 2


@dataclass(frozen=True)
class Route:
    """How one edge is drawn: its path (SVG ``d``), where it starts, where its arrow's tip
    is, and where a label along it goes."""

    edge: DrawnEdge
    path: str
    start: Point
    tip: Point
    label_at: Point


@dataclass(frozen=True)
class Geometry:
    boxes: dict[str, Box]
    routes: list[Route]
    width: float
    gutter: float


def _positions(bands: Sequence[Band], widths: Mapping[str, float],
               gutter: float) -> tuple[dict[str, Point], float]:
    """Node centres (each band spread over the same inner width) and the picture's width."""
    slot = {b.label: max(widths[n] for n in b.members) + GAP for b in bands}
    inner = max([860.0] + [slot[b.label] * len(b.members) for b in bands])
    pos: dict[str, Point] = {}
    for i, band in enumerate(bands):
        y = TOP + i * BAND_H + BAND_H / 2
        step = inner / len(band.members)
        for k, name in enumerate(band.members):
            pos[name] = (gutter + step * (k + 0.5), y)
    return pos, gutter + inner + OUTER + 12.0


@dataclass(frozen=True)
class Crossing:
    """Where an edge passes a band between its ends: ``x`` on the band's centre line
    ``y``, in gap ``gap`` of the band (0: left of its first node), whose stretch
    ``low``..``high`` keeps :data:`CLEAR` from the band's nodes."""

    x: float
    y: float
    gap: int
    low: float
    high: float


def _gaps(nodes: Sequence[tuple[float, float]]) -> list[tuple[float, float]]:
    """The stretches of a band (nodes as (x, half width), left to right) that keep
    :data:`CLEAR` from its nodes: before the first (:data:`OUTER` wide), between each
    two, after the last."""
    out = [(nodes[0][0] - nodes[0][1] - CLEAR - OUTER, nodes[0][0] - nodes[0][1] - CLEAR)]
    out += [(p[0] + p[1] + CLEAR, q[0] - q[1] - CLEAR) for p, q in pairwise(nodes)]
    out.append((nodes[-1][0] + nodes[-1][1] + CLEAR, nodes[-1][0] + nodes[-1][1] + CLEAR
                + OUTER))
    return out


def _waypoints(a: Point, b: Point, rows: Sequence[tuple[float, Sequence[tuple[float, float]]]]
               ) -> list[Crossing]:
    """Where an edge crosses the bands strictly between its ends: on the straight line
    when that lies in a gap of the band (a little inside it), else at the middle of the
    gap nearest to it. ``rows`` lists each band's centre y and its nodes' (x, half width),
    left to right."""
    (x1, y1), (x2, y2) = a, b
    lo, hi = min(y1, y2), max(y1, y2)
    points = []
    for y, nodes in sorted(rows, key=lambda r: r[0], reverse=y2 < y1):
        if not lo + 1e-9 < y < hi - 1e-9:
            continue
        x = x1 + (x2 - x1) * (y - y1) / (y2 - y1)
        gaps = _gaps(nodes)
        inside = [g for g, (low, high) in enumerate(gaps) if low + 4.0 <= x <= high - 4.0]
        if inside:
            gap = inside[0]
        else:
            gap = min(range(len(gaps)), key=lambda g: (abs(sum(gaps[g]) / 2 - x), g))
            x = sum(gaps[gap]) / 2
        points.append(Crossing(x, y, gap, *gaps[gap]))
    return points


def _spread(via: list[list[Crossing]], ends: Sequence[tuple[Point, Point]]) -> list[list[Point]]:
    """The crossings as points; those of several edges in one gap of a band spread out,
    :data:`LANE` apart at most and inside the gap, ordered by where the edges come from
    above and go below so they do not cross there needlessly. ``ends`` holds each edge's
    source and target centres."""
    at: dict[tuple[float, int], list[tuple[tuple[float, float, int], int, int]]] = \
        defaultdict(list)
    for k, points in enumerate(via):
        (sx, sy), (tx, ty) = ends[k]
        xs = [sx, *(c.x for c in points), tx]
        for i, c in enumerate(points):
            before, after = xs[i], xs[i + 2]
            upper, lower = (before, after) if ty > sy else (after, before)
            at[(c.y, c.gap)].append(((upper + lower, upper, k), k, i))
    out = [[(c.x, c.y) for c in points] for points in via]
    for items in at.values():
        if len(items) < 2:
            continue
        first = via[items[0][1]][items[0][2]]
        low, high = first.low, first.high
        lane = min(LANE, (high - low) / (len(items) + 1))
        span = lane * (len(items) - 1)
        centre = sum(via[k][i].x for _, k, i in items) / len(items)
        left = min(max(centre - span / 2, low), high - span)
        for slot, (_, k, i) in enumerate(sorted(items)):
            out[k][i] = (left + slot * lane, first.y)
    return out


def _side_ends(band_of: Mapping[str, int], e: DrawnEdge) -> tuple[str, str]:
    """The sides of its source and target an edge uses: down the bands it leaves at the
    bottom and enters at the top, up the other way; within a band it arcs over the top."""
    a, b = band_of[e.source], band_of[e.target]
    if a < b:
        return "bottom", "top"
    if a > b:
        return "top", "bottom"
    return "top", "top"


def _curve(p: Point, q: Point) -> str:
    """A cubic with vertical tangents at both ends; its y stays between theirs."""
    mid = (p[1] + q[1]) / 2
    return f"C{_n(p[0])} {_n(mid)} {_n(q[0])} {_n(mid)} {_n(q[0])} {_n(q[1])}"


def _route(e: DrawnEdge, start_x: float, tip_x: float, source: Box, target: Box,
           via: Sequence[Point]) -> Route:
    half = NODE_H / 2
    if abs(source.y - target.y) < 1e-9:  # same band: an arc over the band
        s = source.y - half - CLEAR
        lift = min(26.0 + 0.12 * abs(tip_x - start_x), MAX_LIFT)
        start, tip = (start_x, source.y - half), (tip_x, target.y - half - TIP_GAP)
        path = (f"M{_n(start[0])} {_n(start[1])} L{_n(start_x)} {_n(s)} "
                f"C{_n(start_x)} {_n(s - lift)} {_n(tip_x)} {_n(s - lift)} {_n(tip_x)} {_n(s)} "
                f"L{_n(tip[0])} {_n(tip[1])}")
        return Route(e, path, start, tip, ((start_x + tip_x) / 2, s - 0.75 * lift - 3.0))
    d = 1.0 if target.y > source.y else -1.0
    start = (start_x, source.y + d * half)
    tip = (tip_x, target.y - d * (half + TIP_GAP))
    current = (start_x, source.y + d * (half + CLEAR))
    pieces = [f"M{_n(start[0])} {_n(start[1])}", f"L{_n(current[0])} {_n(current[1])}"]
    spans: list[tuple[Point, Point]] = []
    for x, y in via:
        entry, leave = (x, y - d * (half + CLEAR)), (x, y + d * (half + CLEAR))
        pieces += [_curve(current, entry), f"L{_n(leave[0])} {_n(leave[1])}"]
        spans.append((current, entry))
        current = leave
    last = (tip_x, target.y - d * (half + CLEAR))
    pieces += [_curve(current, last), f"L{_n(tip[0])} {_n(tip[1])}"]
    spans.append((current, last))
    p, q = spans[len(spans) // 2]
    return Route(e, " ".join(pieces), start, tip, ((p[0] + q[0]) / 2 + 4.0, (p[1] + q[1]) / 2))


def _port_key(own_x: float, toward: float, other_x: float, arc: bool,
              k: int) -> tuple[float, float, float, int]:
    """Where along a side an end sits, left to right. Bottom side, and edges to other
    bands on the top side: by the x the edge heads for. Arcs over the band on the top
    side: those to the left before, those to the right after the other edges, the
    farther arc outside the nearer one (so arcs nest instead of crossing)."""
    if not arc:
        return (1.0, toward, other_x, k)
    group = 0.0 if other_x < own_x else 2.0
    return (group, -other_x, 0.0, k)


def network_geometry(bands: Sequence[Band], edges: Sequence[DrawnEdge]) -> Geometry:
    """Boxes of the nodes and routes of the edges (those with both ends in a band and
    distinct ends), in the order given.

    Parameters
    ----------
    bands : sequence of Band
        The layout, top to bottom (:func:`runner.present.layout.layered`).
    edges : sequence of DrawnEdge
        The edges and pairs to draw.

    Returns
    -------
    Geometry
        Node boxes (wide enough for the name and for one port per
        :data:`PORT_GAP` on each side), one route per drawn edge, the picture's width
        and the room left for band labels.
    """
    band_of = {n: i for i, b in enumerate(bands) for n in b.members}
    drawn = [e for e in edges if e.source in band_of and e.target in band_of
             and e.source != e.target]
    sides = [_side_ends(band_of, e) for e in drawn]
    count: dict[tuple[str, str], int] = defaultdict(int)
    for e, (ss, ts) in zip(drawn, sides, strict=True):
        count[(e.source, ss)] += 1
        count[(e.target, ts)] += 1
    widths = {n: max(node_width(n), PORT_GAP * (1 + max(count[(n, "top")],
                                                        count[(n, "bottom")])))
              for n in band_of}
    gutter = max([GUTTER] + [label_width(b.label) + 36.0 + OUTER for b in bands])
    centres, width = _positions(bands, widths, gutter)
    boxes = {n: Box(x, y, widths[n]) for n, (x, y) in centres.items()}
    rows = [(centres[b.members[0]][1], [(centres[n][0], widths[n] / 2) for n in b.members])
            for b in bands if b.members]
    via = _spread([_waypoints(centres[e.source], centres[e.target], rows) for e in drawn],
                  [(centres[e.source], centres[e.target]) for e in drawn])
    ends: dict[tuple[str, str], list[tuple[tuple[float, float, float, int], int, int]]] = \
        defaultdict(list)
    for k, (e, (ss, ts), points) in enumerate(zip(drawn, sides, via, strict=True)):
        arc = band_of[e.source] == band_of[e.target]
        sx, tx = centres[e.source][0], centres[e.target][0]
        head = points[0][0] if points else tx
        back = points[-1][0] if points else sx
        ends[(e.source, ss)].append((_port_key(sx, head, tx, arc, 2 * k), k, 0))
        ends[(e.target, ts)].append((_port_key(tx, back, sx, arc, 2 * k + 1), k, 1))
    port: dict[tuple[int, int], float] = {}
    for (name, _), items in sorted(ends.items()):
        box = boxes[name]
        for slot, (_, k, end) in enumerate(sorted(items)):
            port[(k, end)] = box.x - box.half + box.width * (slot + 1) / (len(items) + 1)
    routes = [_route(e, port[(k, 0)], port[(k, 1)], boxes[e.source], boxes[e.target], via[k])
              for k, e in enumerate(drawn)]
    return Geometry(boxes, routes, width, gutter)


def _markers(fig: str, kinds: Sequence[str]) -> str:
    out = []
    for kind in kinds:
        colour = STYLES[kind].colour
        out.append(f'<marker id="{fig}-arrow-{kind}" viewBox="0 0 10 10" refX="10" refY="5" '
                   f'markerWidth="{_n(ARROW)}" markerHeight="{_n(ARROW)}" '
                   f'markerUnits="userSpaceOnUse" orient="auto-start-reverse">'
                   f'<path d="M0 0 L10 5 L0 10 z" fill="{colour}"/></marker>')
    return "<defs>" + "".join(out) + "</defs>"


def legend_entries(edges: Sequence[DrawnEdge], texts: Mapping[str, str] | None = None
                   ) -> list[tuple[str, str]]:
    """What the legend lists for a picture of these edges: the node and the band, then
    each edge kind drawn (in :data:`STYLES` order) and the width scale when an edge
    carries a confidence; nothing the picture does not show. ``texts`` replaces the
    default text of an entry (keys: ``node``, ``band``, a kind, ``confidence``)."""
    texts = texts or {}
    drawn = {e.kind for e in edges}
    entries = [("node", texts.get("node", "variable")),
               ("band", texts.get("band", "tier (earliest on top)"))]
    entries += [(k, texts.get(k, STYLES[k].legend)) for k in STYLES if k in drawn]
    if any(e.confidence is not None for e in edges):
        entries.append(("confidence", texts.get("confidence",
                                                "width: share of bootstrap replicates")))
    return entries


def _legend(fig: str, entries: Sequence[tuple[str, str]], top: float,
            width: float) -> tuple[str, float]:
    """Legend rows: (kind or 'node', 'band' or 'confidence', text); each item is a
    ``<g class="legend-item legend-{kind}">``."""
    parts = [f'<g class="legend" transform="translate(0 {_n(top)})">',
             '<text x="16" y="14" class="legend-title">Legend</text>']
    x, y = 80.0, 0.0
    for kind, text in entries:
        item_w = 56 + 6.6 * len(text) + 24
        if x + item_w > width:
            x, y = 80.0, y + LEGEND_ROW
        parts.append(f'<g class="legend-item legend-{kind}">')
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
        parts.append(f'<text x="{_n(x + 44)}" y="{_n(y + 14)}">{esc(text)}</text></g>')
        x += item_w
    parts.append("</g>")
    return "".join(parts), y + LEGEND_ROW


def network_svg(fig: str, bands: Sequence[Band], index: Mapping[str, int],
                edges: Sequence[DrawnEdge], caption: str,
                legend_texts: Mapping[str, str] | None = None) -> str:
    """The network in tier bands, routed by :func:`network_geometry`, with a legend of
    what it draws (:func:`legend_entries`).

    Nodes are ``<g class="node" id="{fig}-node-{i}">``, edges ``<g class="edge
    edge-{kind}" id="{fig}-edge-{i}-{j}">`` (``diff-{kind}`` for the kinds of an overlay;
    pairs that are not edges, such as forbidden ones, get class ``pair pair-forbidden``
    and id ``{fig}-pair-{i}-{j}``); each holds one ``<path>`` whose last point is its
    arrow's tip.
    """
    geometry = network_geometry(bands, edges)
    boxes, width = geometry.boxes, geometry.width
    drawn = [r.edge for r in geometry.routes]
    legend = legend_entries(drawn, legend_texts)
    kinds = [k for k in STYLES if any(e.kind == k for e in drawn)]
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
    for route in geometry.routes:
        e = route.edge
        s = STYLES[e.kind]
        width_px = s.width if e.confidence is None else 1.0 + 4.0 * e.confidence
        dash = f' stroke-dasharray="{s.dash}"' if s.dash else ""
        opacity = "" if e.confidence is None else \
            f' stroke-opacity="{0.35 + 0.65 * e.confidence:.2f}"'
        cls = "pair" if e.kind == "forbidden" else "edge"
        variant = f"diff-{e.kind}" if e.kind in DIFF_KINDS else f"{cls}-{e.kind}"
        ident = f"{fig}-{cls}-{index[e.source]}-{index[e.target]}"
        out.append(f'<g class="{cls} {variant}" id="{ident}" data-from="{esc(e.source)}" '
                   f'data-to="{esc(e.target)}"><title>{esc(e.title)}</title>'
                   f'<path d="{route.path}" fill="none" stroke="{s.colour}" '
                   f'stroke-width="{width_px:.2f}"{dash}{opacity} '
                   f'marker-end="url(#{fig}-arrow-{e.kind})"/>')
        if e.confidence is not None:
            x, y = route.label_at
            out.append(f'<text class="edge-label" x="{_n(x)}" y="{_n(y)}">'
                       f"{e.confidence:.0%}</text>")
        out.append("</g>")
    for name, box in boxes.items():
        out.append(f'<g class="node" id="{fig}-node-{index[name]}" data-name="{esc(name)}">'
                   f'<rect x="{_n(box.x - box.half)}" y="{_n(box.y - NODE_H / 2)}" '
                   f'width="{_n(box.width)}" height="{_n(NODE_H)}" rx="9" fill="{NODE_FILL}" '
                   f'stroke="{NODE_STROKE}" stroke-width="1.4"/><text x="{_n(box.x)}" '
                   f'y="{_n(box.y + 4.5)}" text-anchor="middle" class="node-label">'
                   f"{esc(name)}</text></g>")
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
