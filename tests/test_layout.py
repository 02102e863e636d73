"""The report's layered layout and the network picture: every variable once, tiers in
order and numbered from 1, untiered variables by depth, the same input always gives the
same layout; in the SVG no two edge ends (arrow tips or start points) meet, and no curve
comes close to a node box it does not end at."""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from itertools import pairwise

import numpy as np
from conftest import random_dag
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.present.layout import layered
from runner.present.svg import ARROW, CLEAR, DrawnEdge, network_svg, nice_ticks


@settings(max_examples=60, deadline=None)
@given(n=st.integers(1, 9), seed=st.integers(0, 2**16), tiers=st.integers(0, 3))
def test_every_variable_once_tiers_in_order(n: int, seed: int, tiers: int) -> None:
    rng = np.random.default_rng(seed)
    names = [f"v{i}" for i in range(n)]
    parents = random_dag(n, rng)
    edges = [[names[p], names[c]] for c, ps in enumerate(parents) for p in ps]
    tier_of = rng.integers(-1, tiers, size=n) if tiers else np.full(n, -1)
    spec_tiers = [[names[i] for i in range(n) if tier_of[i] == t] for t in range(tiers)]
    spec_tiers = [t for t in spec_tiers if t]
    bands = layered(names, spec_tiers, edges)
    placed = [m for b in bands for m in b.members]
    assert sorted(placed) == sorted(names)
    assert [set(b.members) for b in bands[:len(spec_tiers)]] == [set(t) for t in spec_tiers]
    # tiers are numbered from 1
    assert [b.label for b in bands[:len(spec_tiers)]] == [
        f"tier {t + 1}" for t in range(len(spec_tiers))]
    # untiered bands: a variable's untiered parents sit in earlier bands (depth order)
    band_of = {m: k for k, b in enumerate(bands) for m in b.members}
    untiered = {names[i] for i in range(n) if tier_of[i] == -1}
    for a, b in edges:
        if a in untiered and b in untiered:
            assert band_of[a] < band_of[b]
    assert layered(names, spec_tiers, edges) == bands


def test_named_tiers_show_number_and_name() -> None:
    bands = layered(["a", "b", "c"], [["a"], ["b"]], [["a", "b"]], ["raw", "kiln"])
    assert [b.label for b in bands] == ["tier 1 · raw", "tier 2 · kiln", "no tier, depth 0"]
    assert [b.label for b in layered(["a", "b"], [["a"], ["b"]], [])] == ["tier 1", "tier 2"]


def test_ticks_cover_the_range() -> None:
    ticks = nice_ticks(-144291.7, -132342.8)
    assert ticks[0] <= -144291.7 and ticks[-1] >= -132342.8
    assert ticks == [-145000.0, -140000.0, -135000.0, -130000.0]


# --------------------------------------------------------------------------- the picture

Point = tuple[float, float]
Rect = tuple[float, float, float, float]  # left, top, right, bottom


def path_samples(d: str, steps: int = 48) -> list[Point]:
    """Points along an SVG path of absolute M, L and C commands (the ones the picture
    writes): cubic Bezier pieces evaluated in Bernstein form, lines linearly."""
    tokens = re.findall(r"[MLC]|-?\d+(?:\.\d+)?", d)
    out: list[Point] = []
    k, current = 0, (0.0, 0.0)
    while k < len(tokens):
        command = tokens[k]
        size = {"M": 2, "L": 2, "C": 6}[command]
        v = [float(x) for x in tokens[k + 1:k + 1 + size]]
        k += 1 + size
        if command == "M":
            current = (v[0], v[1])
            out.append(current)
        elif command == "L":
            end = (v[0], v[1])
            out += [(current[0] + (end[0] - current[0]) * t / steps,
                     current[1] + (end[1] - current[1]) * t / steps) for t in range(1, steps + 1)]
            current = end
        else:
            p0, p1, p2, p3 = current, (v[0], v[1]), (v[2], v[3]), (v[4], v[5])
            for i in range(1, steps + 1):
                t = i / steps
                b = ((1 - t) ** 3, 3 * t * (1 - t) ** 2, 3 * t * t * (1 - t), t ** 3)
                out.append((sum(w * p[0] for w, p in zip(b, (p0, p1, p2, p3), strict=True)),
                            sum(w * p[1] for w, p in zip(b, (p0, p1, p2, p3), strict=True))))
            current = p3
    return out


def distance_to_rect(p: Point, r: Rect) -> float:
    dx = max(r[0] - p[0], 0.0, p[0] - r[2])
    dy = max(r[1] - p[1], 0.0, p[1] - r[3])
    return math.hypot(dx, dy)


def picture_parts(svg: str) -> tuple[dict[str, Rect], list[tuple[str, str, str, str]]]:
    """Node boxes by name, and (kind class, from, to, path d) of every drawn edge/pair."""
    boxes = {}
    for name, x, y, w, h in re.findall(
            r'<g class="node" id="[^"]+" data-name="([^"]*)"><rect x="([-\d.]+)" '
            r'y="([-\d.]+)" width="([\d.]+)" height="([\d.]+)"', svg):
        left, top = float(x), float(y)
        boxes[name] = (left, top, left + float(w), top + float(h))
    edges = re.findall(r'<g class="(?:edge|pair) ([a-z-]+)" id="[^"]+" data-from="([^"]*)" '
                       r'data-to="([^"]*)"><title>[^<]*</title><path d="([^"]+)"', svg)
    return boxes, edges


@st.composite
def pictures(draw: st.DrawFn) -> tuple[list[str], list[list[str]], list[DrawnEdge]]:
    """A random DAG of up to 12 variables (names of varied length), dense at times, in
    random tiers (edges may go down, up or within a band), with some forbidden pairs."""
    n = draw(st.integers(2, 12))
    seed = draw(st.integers(0, 2**16))
    density = draw(st.sampled_from([0.2, 0.5, 0.9]))
    rng = np.random.default_rng(seed)
    names = [f"v{i}" + "x" * int(rng.integers(0, 9)) for i in range(n)]
    parents = random_dag(n, rng, density)
    tiers_n = draw(st.integers(0, 4))
    tier_of = rng.integers(-1, tiers_n, size=n) if tiers_n else np.full(n, -1)
    tiers = [[names[i] for i in range(n) if tier_of[i] == t] for t in range(tiers_n)]
    edges = [DrawnEdge(names[p], names[c], "learned", "") for c, ps in enumerate(parents)
             for p in ps]
    pairs = {(e.source, e.target) for e in edges}
    forbidden = [(names[int(a)], names[int(b)]) for a, b in rng.integers(0, n, size=(3, 2))
                 if a != b and (names[int(a)], names[int(b)]) not in pairs]
    edges += [DrawnEdge(a, b, "forbidden", "") for a, b in sorted(set(forbidden))]
    return names, [t for t in tiers if t], edges


def vertical_pieces(d: str) -> list[tuple[float, float, float]]:
    """(x, top, bottom) of each straight vertical piece (``L`` to a point straight below
    or above the current one) of an SVG path."""
    numbers = re.findall(r"([MLC])|(-?\d+(?:\.\d+)?)", d)
    out, values, command, current = [], [], "", (0.0, 0.0)
    for letter, number in [*numbers, ("M", "")]:
        if letter:
            if command == "L" and values[0] == current[0]:
                out.append((values[0], min(values[1], current[1]), max(values[1], current[1])))
            if command:
                current = (values[-2], values[-1])
            command, values = letter, []
        else:
            values.append(float(number))
    return out


def endpoints(d: str) -> tuple[Point, Point]:
    numbers = [float(x) for x in re.findall(r"-?\d+(?:\.\d+)?", d)]
    return (numbers[0], numbers[1]), (numbers[-2], numbers[-1])


@settings(max_examples=80, deadline=None)
@given(case=pictures())
def test_edge_ends_are_apart_and_curves_clear_other_nodes(
        case: tuple[list[str], list[list[str]], list[DrawnEdge]]) -> None:
    names, tiers, edges = case
    learned = [[e.source, e.target] for e in edges if e.kind == "learned"]
    bands = layered(names, tiers, learned)
    svg = network_svg("net", bands, {n: i for i, n in enumerate(names)}, edges, "c")
    boxes, drawn = picture_parts(svg)
    assert sorted(boxes) == sorted(names)
    assert len(drawn) == len(edges)
    # no two arrow tips, no two start points, no tip on a start: all ends apart by more
    # than an arrowhead's width (so a forbidden pair's marker never sits on an edge's
    # arrowhead either)
    ends: list[tuple[Point, str]] = []
    for kind, _, _, d in drawn:
        start, tip = endpoints(d)
        ends += [(start, f"start {kind}"), (tip, f"tip {kind}")]
    for i, (p, what) in enumerate(ends):
        for q, other in ends[i + 1:]:
            assert math.dist(p, q) > ARROW, (what, other, p, q)
    # edges passing one gap of a band run in lanes of their own: no two straight pieces
    # of different edges lie on one another
    pieces = [(k, *piece) for k, (*_, d) in enumerate(drawn) for piece in vertical_pieces(d)]
    for i, (k, x, lo, hi) in enumerate(pieces):
        for m, x2, lo2, hi2 in pieces[i + 1:]:
            assert k == m or abs(x - x2) >= 0.5 or min(hi, hi2) - max(lo, lo2) < 1.0, \
                (drawn[k][1:3], drawn[m][1:3], x, x2)
    # every curve keeps CLEAR (less the 0.1 rounding of coordinates) from each node box
    # it does not end at
    for kind, a, b, d in drawn:
        for name, rect in boxes.items():
            if name in (a, b):
                continue
            gap = min(distance_to_rect(p, rect) for p in path_samples(d))
            assert gap >= CLEAR - 0.3, (kind, a, b, name, gap)


def sample_clearance(svg: str, ends_excluded: Sequence[str] = ()) -> float:
    boxes, drawn = picture_parts(svg)
    return min(distance_to_rect(p, rect) for _, a, b, d in drawn for name, rect in boxes.items()
               if name not in (a, b, *ends_excluded) for p in path_samples(d))


def test_a_long_edge_bends_around_the_node_in_its_way() -> None:
    # a -> c straight down would run through b, which sits between them
    bands = layered(["a", "b", "c"], [["a"], ["b"], ["c"]], [["a", "c"]])
    svg = network_svg("net", bands, {"a": 0, "b": 1, "c": 2},
                      [DrawnEdge("a", "c", "learned", "")], "c")
    assert sample_clearance(svg) >= CLEAR - 0.3
    # three edges into one node: three arrow tips, apart
    edges = [DrawnEdge(s, "d", "learned", "") for s in ("a", "b", "c")]
    bands = layered(["a", "b", "c", "d"], [["a", "b", "c"], ["d"]],
                    [[e.source, e.target] for e in edges])
    svg = network_svg("net", bands, {"a": 0, "b": 1, "c": 2, "d": 3}, edges, "c")
    tips = sorted(endpoints(d)[1] for *_, d in picture_parts(svg)[1])
    assert len({round(x) for x, _ in tips}) == 3 and len({y for _, y in tips}) == 1
    assert all(q[0] - p[0] > ARROW for p, q in pairwise(tips))
