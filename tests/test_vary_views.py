"""Views of a variation summary: ``dagmill report SUMMARY`` (the combinations table and
the union of edges drawn with widths by their share of combinations, as bootstrap
confidence is drawn), ``dagmill compare SUMMARY_A SUMMARY_B`` (the change of each edge's
share and of the stable core), and autoescaping of the page."""

from __future__ import annotations

import json
import re
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import pytest
from conftest import CliCall, kiln_spec_text, write_kiln_data

from runner.present.report import render_variation_report
from runner.store import list_variations, read_run, read_variation

ROWS = 1000
NAME = "kiln-views"
FAST = ("--quiet", "--workers", "1")
SPEC = kiln_spec_text(NAME)
#: two combinations each: the first summary over ESS 1 and 50, the second over 1 and 200
VARY_A = "vary:\n  score.ess: [1, 50]\n"
VARY_B = "vary:\n  score.ess: [1, 200]\n"


@pytest.fixture(scope="module")
def two_summaries(tmp_path_factory: pytest.TempPathFactory,
                  cli_session: CliCall) -> tuple[Path, dict[str, Any], dict[str, Any]]:
    """A project with two variation summaries of one spec (VARY_A, then VARY_B)."""
    project = tmp_path_factory.mktemp("views")
    write_kiln_data(project, ROWS)
    spec = project / "specs" / "views.yaml"
    docs = []
    for vary in (VARY_A, VARY_B):
        before = set(list_variations(project / "results", NAME))
        spec.write_text(SPEC + vary, encoding="utf-8")
        done = cli_session("run", "specs/views.yaml", *FAST, cwd=project)
        assert done.returncode == 0, done.stderr
        # the new summary (two written in one second are ordered by their hash, not time)
        (new,) = set(list_variations(project / "results", NAME)) - before
        docs.append(read_variation(new))
    assert docs[0]["summary_id"] != docs[1]["summary_id"]
    return project, docs[0], docs[1]


def _figure(html: str) -> ET.Element:
    """The network picture of the page, parsed as XML."""
    match = re.search(r'<svg class="figure" id="vary".*?</svg>', html, re.S)
    assert match is not None
    return ET.fromstring(match.group(0))


def test_the_report_of_a_summary_draws_each_edge_by_its_share(
        two_summaries: tuple[Path, dict[str, Any], dict[str, Any]], cli: CliCall) -> None:
    project, summary, _ = two_summaries
    out = project / "vary.html"
    done = cli("report", summary["summary_id"], "--out", out, cwd=project)
    assert done.returncode == 0, done.stderr
    html = out.read_text(encoding="utf-8")
    # the combinations table: one row per combination with its values, run and edges
    for c in summary["combinations"]:
        assert re.search(rf"<td>{c['values']['score.ess']}</td><td class=\"hash\">"
                         rf"{c['run_id']}</td>.*?<td class=\"num\">{c['edges']}</td>", html)
    # one drawn edge per edge of any combination's DAG, none other
    expected = {(s["edge"][0], s["edge"][1]): s["directed"] for s in summary["shares"]
                if s["directed"] > 0}
    assert {0.5, 1.0} <= set(expected.values())  # both kinds of share occur
    drawn: dict[tuple[str, str], float] = {}
    for g in _figure(html).iter("g"):
        if "edge" in (g.get("class") or "").split():
            path = g.find("path")
            assert path is not None
            drawn[(g.get("data-from") or "", g.get("data-to") or "")] = float(
                path.get("stroke-width") or "nan")
            stable = expected[(g.get("data-from") or "", g.get("data-to") or "")] == 1.0
            assert ("edge-stable" in (g.get("class") or "")) == stable
    assert set(drawn) == set(expected)
    # widths ordered as the shares: a larger share is a wider edge, equal shares alike
    for e in expected:
        for f in expected:
            assert (expected[e] < expected[f]) == (drawn[e] < drawn[f])
    assert "share of combinations (of 2)" in html
    assert f"Stable core: {len(summary['stable_core']['directed'])} directed" in html


def test_the_variation_page_escapes_what_it_shows(
        two_summaries: tuple[Path, dict[str, Any], dict[str, Any]]) -> None:
    project, summary, _ = two_summaries
    evil = "<script>alert(1)</script>"
    doc = json.loads(json.dumps(summary))
    doc["spec_name"] = evil
    doc["combinations"][0]["values"]["score.ess"] = evil
    first = doc["combinations"][0]["run_id"]
    record = read_run(project / "results" / NAME / "runs" / first)
    html = render_variation_report(doc, record)
    assert evil not in html
    assert html.count("&lt;script&gt;alert(1)&lt;/script&gt;") >= 3  # title, heading, cell


def test_compare_of_two_summaries_lists_the_share_changes(
        two_summaries: tuple[Path, dict[str, Any], dict[str, Any]], cli: CliCall) -> None:
    project, a, b = two_summaries
    done = cli("compare", a["summary_id"], b["summary_id"], "--json", cwd=project)
    assert done.returncode == 0, done.stderr
    result = json.loads(done.stdout)
    # the expected changes, counted here from the two summaries' JSON
    kinds = ("directed", "class", "adjacent")
    sa = {tuple(s["edge"]): s for s in a["shares"]}
    sb = {tuple(s["edge"]): s for s in b["shares"]}
    expected = {}
    for edge in sorted(set(sa) | set(sb)):
        delta = {k: sb.get(edge, {}).get(k, 0.0) - sa.get(edge, {}).get(k, 0.0)
                 for k in kinds}
        expected[edge] = delta
    assert {tuple(e["edge"]): e["delta"] for e in result["edges"]} == expected
    changed = sorted(e for e, d in expected.items() if any(d.values()))
    assert [tuple(e) for e in result["changed"]] == changed
    assert changed  # ESS 50 and 200 learn different graphs here
    moved = 0
    for kind in ("directed", "class"):
        core_a = {tuple(e) for e in a["stable_core"][kind]}
        core_b = {tuple(e) for e in b["stable_core"][kind]}
        core = result["stable_core"][kind]
        assert {tuple(e) for e in core["gained"]} == core_b - core_a
        assert {tuple(e) for e in core["lost"]} == core_a - core_b
        assert {tuple(e) for e in core["kept"]} == core_a & core_b
        moved += len(core_a ^ core_b)
    assert moved  # some stable edge changes between the two summaries
    # the text lists every changed edge with its change
    text = cli("compare", a["summary_id"], b["summary_id"], cwd=project)
    assert text.returncode == 0, text.stderr
    rows = {line.split("  ")[0]: line for line in text.stdout.splitlines()}
    for x, y in changed:
        line = rows[f"{x} -> {y}"]
        assert [f"({expected[(x, y)][k]:+.3f})" for k in kinds] == re.findall(
            r"\([+-]\d\.\d{3}\)", line)
    listed = [r for r in rows if re.fullmatch(r"\w+ -> \w+", r)]
    assert sorted(tuple(r.split(" -> ")) for r in listed) == changed  # and no other edge


def test_a_summary_and_a_run_are_not_compared(
        two_summaries: tuple[Path, dict[str, Any], dict[str, Any]], cli: CliCall) -> None:
    project, a, _ = two_summaries
    done = cli("compare", a["summary_id"], a["combinations"][0]["run_id"], cwd=project)
    assert done.returncode == 2
    assert "not one of each" in done.stderr and "Traceback" not in done.stderr


def test_compare_of_summaries_is_antisymmetric_and_empty_against_itself(
        two_summaries: tuple[Path, dict[str, Any], dict[str, Any]]) -> None:
    from runner.compare.variations import compare_variations

    _, a, b = two_summaries
    same = compare_variations(a, a)
    assert same["changed"] == []
    assert all(not core["gained"] and not core["lost"]
               for core in same["stable_core"].values())
    forth, back = compare_variations(a, b), compare_variations(b, a)
    assert [e["edge"] for e in forth["edges"]] == [e["edge"] for e in back["edges"]]
    for x, y in zip(forth["edges"], back["edges"], strict=True):
        assert x["a"] == y["b"] and x["b"] == y["a"]
        assert {k: -v for k, v in x["delta"].items()} == y["delta"]
    for kind in ("directed", "class"):
        assert forth["stable_core"][kind]["gained"] == back["stable_core"][kind]["lost"]


def test_data_is_refused_when_comparing_summaries(
        two_summaries: tuple[Path, dict[str, Any], dict[str, Any]], cli: CliCall) -> None:
    project, a, b = two_summaries
    done = cli("compare", a["summary_id"], b["summary_id"], "--data", "datasets/kiln.csv",
               cwd=project)
    assert done.returncode == 2
    assert "--data" in done.stderr and "Traceback" not in done.stderr
