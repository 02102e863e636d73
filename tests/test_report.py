"""The HTML report: well-formed, one SVG element per variable and per edge, nothing
fetched from elsewhere, text escaped, deterministic; opened in headless Chromium; bad input."""

from __future__ import annotations

import json
import re
import shutil
import struct
import subprocess
import sys
import zlib
from html.parser import HTMLParser
from pathlib import Path

import pytest
from conftest import CliCall, CliResult, demo_spec_with_holdout

import runner.present.report as report_module
from runner.present.report import render_report
from runner.store import read_model, read_run

VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source",
        "track", "wbr"}


class Checked(HTMLParser):
    """html.parser (Python standard library) with a tag stack: every end tag must close
    the innermost open element; collects each element's tag, id and classes."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.elements: list[tuple[str, str, set[str]]] = []
        self.errors: list[str] = []
        self.text: list[str] = []

    def _record(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = dict(attrs)
        self.elements.append((tag, a.get("id") or "", set((a.get("class") or "").split())))

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self._record(tag, attrs)
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self._record(tag, attrs)

    def handle_endtag(self, tag: str) -> None:
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
        else:
            self.stack.pop()

    def handle_data(self, data: str) -> None:
        self.text.append(data)


def parse(text: str) -> Checked:
    checked = Checked()
    checked.feed(text)
    checked.close()
    assert checked.errors == [] and checked.stack == []
    ids = [i for _, i, _ in checked.elements if i]
    assert len(ids) == len(set(ids)), "ids must be unique"
    return checked


@pytest.fixture
def run(cli: CliCall) -> CliCall:
    """``dagmill *args`` in this process."""
    return cli


@pytest.fixture
def report(cli: CliCall) -> CliCall:
    """``dagmill report *args --results folder/results`` in this process."""

    def call(folder: Path, *args: str) -> CliResult:
        return cli("report", *args, "--results", str(folder / "results"))

    return call


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory: pytest.TempPathFactory,
             cli_session: CliCall) -> tuple[Path, dict, dict]:
    """The demo spec with a hold-out (BIC), and again under AIC with restarts."""
    run = cli_session
    folder = tmp_path_factory.mktemp("report")
    results = folder / "results"
    first = run("run", str(demo_spec_with_holdout(folder)), "--results", str(results),
                "--json")
    assert first.returncode == 0, first.stderr
    spec = demo_spec_with_holdout(folder).read_text().replace("name: bic", "name: aic")
    spec = spec.replace("  restarts: 0\n", "  restarts: 2\n")
    (folder / "other.yaml").write_text(spec)
    second = run("run", str(folder / "other.yaml"), "--results", str(results), "--json")
    assert second.returncode == 0, second.stderr
    a = json.loads((Path(json.loads(first.stdout)["runs"][0]["folder"]) / "run.json")
                   .read_text())
    b = json.loads((Path(json.loads(second.stdout)["runs"][0]["folder"]) / "run.json")
                   .read_text())
    assert b["search"]["parameters"]["restarts"] == 2
    return folder, a, b


def test_report_is_well_formed_and_draws_every_variable_and_edge(
        two_runs: tuple[Path, dict, dict], report: CliCall) -> None:
    folder, a, _ = two_runs
    out = folder / "a.html"
    result = report(folder, a["run_id"], "--out", str(out), "--show-forbidden")
    assert result.returncode == 0, result.stderr
    assert f"wrote {out}" in result.stdout
    text = out.read_text(encoding="utf-8")
    checked = parse(text)
    nodes = [i for tag, i, cls in checked.elements if tag == "g" and "node" in cls
             and i.startswith("net-")]
    edges = [i for tag, i, cls in checked.elements if tag == "g" and "edge" in cls
             and i.startswith("net-")]
    names = list(a["data"]["columns"])
    assert sorted(nodes) == sorted(f"net-node-{k}" for k in range(len(names)))
    index = {n: k for k, n in enumerate(names)}
    assert sorted(edges) == sorted(f"net-edge-{index[x]}-{index[y]}" for x, y in a["edges"])
    required = [i for tag, i, cls in checked.elements if "edge-required" in cls]
    assert required == [f"net-edge-{index['kiln_peak']}-{index['crack']}"]
    forbidden = [i for tag, i, cls in checked.elements if "pair-forbidden" in cls]
    assert forbidden == [f"net-pair-{index['supplier']}-{index['grade']}"]
    words = " ".join(checked.text)
    assert a["caution"] in words and "Legend" in words
    for key in ("spec_sha256", "input_sha256", "graph_sha256"):
        assert a[key] in words
    assert a["model"]["sha256"] in words and a["data"]["sha256"] in words
    assert "Held-out fit" in words and "4000 rows held out" in words
    assert_offline(text)
    # the same inputs give the same bytes
    again = folder / "again.html"
    assert report(folder, a["run_id"], "--out", str(again), "--show-forbidden").returncode == 0
    assert again.read_bytes() == out.read_bytes()


def svg_of(text: str, fig: str) -> str:
    """The ``<svg id=fig>`` element of a page."""
    found = re.search(rf'<svg class="figure" id="{fig}".*?</svg>', text, flags=re.DOTALL)
    assert found is not None, fig
    return found.group(0)


def legend_kinds(text: str, fig: str) -> set[str]:
    """The kinds the legend of picture ``fig`` lists."""
    return set(re.findall(r'<g class="legend-item legend-([a-z]+)">', svg_of(text, fig)))


def drawn_kinds(text: str, fig: str) -> set[str]:
    """The kinds of edge and pair the picture ``fig`` draws."""
    return set(re.findall(r'<g class="(?:edge|pair) (?:edge-|pair-|diff-)([a-z]+)"',
                          svg_of(text, fig)))


def assert_offline(text: str) -> None:
    """No external reference at all: no scheme, no protocol-relative link, no src/href,
    no stylesheet import; CSS url() only to ids in the page."""
    assert not re.search(r"(?i)\b(https?|ftp|file|data):", text)
    assert not re.search(r"//[A-Za-z0-9]", text)
    assert not re.search(r"(?i)\s(src|href|xlink:href)\s*=", text)
    assert "@import" not in text and "<link" not in text and "<script" not in text
    assert all(u.startswith("#") for u in re.findall(r"url\(([^)]*)\)", text))


def test_report_against_another_run(two_runs: tuple[Path, dict, dict],
                                    report: CliCall) -> None:
    folder, a, b = two_runs
    out = folder / "vs.html"
    assert report(folder, b["run_id"], "--vs", a["run_id"], "--out", str(out)).returncode == 0
    text = out.read_text(encoding="utf-8")
    checked = parse(text)
    pairs_a, pairs_b = {tuple(e) for e in b["edges"]}, {tuple(e) for e in a["edges"]}
    reversed_ = {e for e in pairs_b - pairs_a if (e[1], e[0]) in pairs_a}
    expected = {"diff-common": len(pairs_a & pairs_b),
                "diff-added": len(pairs_b - pairs_a - reversed_),
                "diff-removed": len({e for e in pairs_a - pairs_b
                                     if (e[1], e[0]) not in pairs_b}),
                "diff-reversed": len(reversed_)}
    for kind, count in expected.items():
        found = [i for tag, i, cls in checked.elements if tag == "g" and kind in cls
                 and "edge" in cls]
        assert len(found) == count, kind
    assert sum(expected.values()) > expected["diff-common"], "the runs should differ"
    words = " ".join(checked.text)
    # the legend lists exactly the kinds drawn
    drawn = {kind.removeprefix("diff-") for kind, count in expected.items() if count}
    assert legend_kinds(text, "diff") == {"node", "band"} | drawn
    texts = {"added": "added in B", "removed": "removed in B", "reversed": "reversed in B",
             "common": "in both runs"}
    assert all((texts[k] in words) == (k in drawn) for k in texts)
    # the overlay comes right after the inputs, before the run's own network
    headings = re.findall(r"<h2>([^<]*)</h2>", text)
    assert headings[:3] == ["Inputs and hashes", f"Against run {a['run_id']}", "Network"]
    # the restarted run's trace: one line per run and the kicks between them
    series = re.findall(r'<polyline class="series"[^>]*><title>([^<]*)</title>', text)
    assert series.count("first run") == 1 and "restart 1" in series
    assert "kick: random moves before a restart" in series
    assert "held-out per row" in words
    assert_offline(text)


SCRIPT = "<script>alert(1)</script>"


def without_pictures(text: str) -> str:
    """The page with every ``<svg>`` element cut out: what the template wrote itself."""
    return re.sub(r"<svg.*?</svg>", "", text, flags=re.DOTALL)


def test_text_is_escaped(tmp_path: Path, run: CliCall, report: CliCall) -> None:
    # names with markup in them, in the data's header and the spec's tiers: the template
    # engine's autoescaping (HTML) and runner.present.svg (pictures) escape them
    data = tmp_path / "odd.csv"
    data.write_text(f'"a<b>","c&d","e""f","{SCRIPT}"\n' + "".join(
        f"{i % 2},{(i // 2) % 2},{i % 3},{(i * 7) % 2}\n" for i in range(60)))
    spec = tmp_path / "odd.yaml"
    spec.write_text(f"name: odd\ndataset:\n  path: {data.name}\ntiers:\n  - ['a<b>']\n"
                    f"  - ['{SCRIPT}']\n")
    stored = run("run", str(spec), "--results", str(tmp_path / "results"), "--json")
    assert stored.returncode == 0, stored.stderr
    run_id = json.loads(stored.stdout)["runs"][0]["run_id"]
    out = tmp_path / "odd.html"
    assert report(tmp_path, run_id, "--out", str(out)).returncode == 0
    text = out.read_text()
    checked = parse(text)
    assert "<b>" not in text and "<script" not in text
    for part in (without_pictures(text), svg_of(text, "net")):
        assert "a&lt;b&gt;" in part and "c&amp;d" in part
        assert "&lt;script&gt;alert(1)&lt;/script&gt;" in part
    assert 'data-name="e&quot;f"' in text
    assert {"a<b>", "c&d", 'e"f', SCRIPT} <= set(checked.text)
    # a tier's name from the spec is escaped in the band label too
    folder = tmp_path / "results" / "odd" / "runs" / run_id
    record = read_run(folder)
    record["spec"]["tier_names"] = ["raw & <i>early</i>", SCRIPT]
    page = render_report(record, folder, read_model(folder, record))
    assert "<script" not in page and "<i>" not in page
    assert "tier 1 · raw &amp; &lt;i&gt;early&lt;/i&gt;" in svg_of(page, "net")
    assert {"tier 1 · raw & <i>early</i>", f"tier 2 · {SCRIPT}"} <= set(parse(page).text)


def test_legend_lists_only_what_the_picture_draws(two_runs: tuple[Path, dict, dict],
                                                  report: CliCall) -> None:
    folder, a, _ = two_runs
    run_folder = folder / "results" / "kiln-line" / "runs" / a["run_id"]
    model = read_model(run_folder, a)

    def kinds(record: dict, show_forbidden: bool = False) -> tuple[set[str], set[str]]:
        page = render_report(record, run_folder, model, show_forbidden=show_forbidden)
        return legend_kinds(page, "net"), drawn_kinds(page, "net")

    # the demo: learned edges and one required edge; forbidden pairs only when asked
    legend, drawn = kinds(a)
    assert drawn == {"learned", "required"} and legend == {"node", "band"} | drawn
    legend, drawn = kinds(a, show_forbidden=True)
    assert drawn == {"learned", "required", "forbidden"}
    assert legend == {"node", "band"} | drawn
    # nothing required, nothing forbidden: neither in the legend, even when asked
    spec = {**a["spec"], "required": [], "forbidden": []}
    legend, drawn = kinds({**a, "spec": spec}, show_forbidden=True)
    assert drawn == {"learned"} and legend == {"node", "band", "learned"}
    # bootstrap confidence: the width scale joins the legend
    shares = {"replicates": 10, "frequencies": [
        {"edge": e, "directed": 0.5, "class": 0.5, "adjacent": 0.5} for e in a["edges"]]}
    legend, drawn = kinds({**a, "bootstrap": shares})
    assert legend == {"node", "band", "learned", "required", "confidence"}
    # no tiers: the band entry says depth, not tier
    page = render_report({**a, "spec": {**a["spec"], "tiers": []}}, run_folder, model)
    legend_text = re.search(r'<g class="legend-item legend-band">.*?<text[^>]*>([^<]*)</text>',
                            svg_of(page, "net"))
    assert legend_text is not None and legend_text.group(1).startswith("depth")


def test_tiers_are_numbered_from_one_and_named_when_the_spec_names_them(
        two_runs: tuple[Path, dict, dict]) -> None:
    folder, a, _ = two_runs
    run_folder = folder / "results" / "kiln-line" / "runs" / a["run_id"]
    model = read_model(run_folder, a)
    labels = re.findall(r'class="band-label">([^<]*)</text>',
                        svg_of(render_report(a, run_folder, model), "net"))
    assert labels == ["tier 1", "tier 2", "tier 3", "tier 4"]
    named = {**a, "spec": {**a["spec"], "tier_names": ["raw", "firing", "defects", "grade"]}}
    labels = re.findall(r'class="band-label">([^<]*)</text>',
                        svg_of(render_report(named, run_folder, model), "net"))
    assert labels == ["tier 1 · raw", "tier 2 · firing", "tier 3 · defects", "tier 4 · grade"]


def test_a_cut_table_says_so(two_runs: tuple[Path, dict, dict],
                             monkeypatch: pytest.MonkeyPatch) -> None:
    folder, a, _ = two_runs
    run_folder = folder / "results" / "kiln-line" / "runs" / a["run_id"]
    model = read_model(run_folder, a)
    assert model is not None
    families = len(a["score"]["families"])
    seen = {name: len(var["configurations"]) for name, var in model["variables"].items()}
    # nothing cut: no cut note
    whole = render_report(a, run_folder, model)
    assert f"All {families} family scores" in whole
    long_tables = [n for n, k in seen.items() if k > report_module.TABLE_ROWS_SHOWN]
    assert whole.count('class="note cut-note"') == len(long_tables)
    # cut: the families table and every fitted table longer than the cut say so
    monkeypatch.setattr(report_module, "TOP_FAMILIES", families - 2)
    monkeypatch.setattr(report_module, "TABLE_ROWS_SHOWN", 3)
    page = render_report(a, run_folder, model)
    words = " ".join(parse(page).text)
    assert f"The {families - 2} lowest of {families} family scores" in words
    cut = sorted(n for n, k in seen.items() if k > 3)
    assert cut and len(cut) < len(seen)
    for name in cut:
        assert f"Showing the first 3 of {seen[name]} rows" in words
        assert f"first 3 of {seen[name]} rows shown" in words  # also in the closed summary
    assert page.count('class="note cut-note"') == 1 + len(cut)


def test_the_report_does_not_reach_back_up_the_pipeline() -> None:
    # a fresh interpreter: importing the report loads no part of the pipeline
    code = ("import sys, runner.present.report; "
            "print(sorted(m for m in sys.modules if m.startswith('runner.pipeline')))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          cwd=Path(__file__).resolve().parents[1], timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "[]"


# --------------------------------------------------------------------------- Chromium


def png_pixels(path: Path) -> tuple[int, int, list[bytes]]:
    """Decode an 8-bit RGB or RGBA PNG (PNG specification, W3C 2003: chunks, zlib stream,
    per-row filters 0-4 with the Paeth predictor) into rows of pixel bytes."""
    blob = path.read_bytes()
    assert blob[:8] == b"\x89PNG\r\n\x1a\n"
    pos, idat, header = 8, b"", None
    while pos < len(blob):
        (length,) = struct.unpack(">I", blob[pos:pos + 4])
        kind, body = blob[pos + 4:pos + 8], blob[pos + 8:pos + 8 + length]
        if kind == b"IHDR":
            header = struct.unpack(">IIBBBBB", body)
        elif kind == b"IDAT":
            idat += body
        pos += 12 + length
    assert header is not None
    width, height, depth, colour = header[:4]
    assert depth == 8 and colour in (2, 6)
    bpp = 3 if colour == 2 else 4
    raw = zlib.decompress(idat)
    stride = width * bpp
    rows, prev = [], bytearray(stride)
    for y in range(height):
        start = y * (stride + 1)
        kind, line = raw[start], bytearray(raw[start + 1:start + 1 + stride])
        for i in range(stride):
            left = line[i - bpp] if i >= bpp else 0
            up, corner = prev[i], prev[i - bpp] if i >= bpp else 0
            if kind == 1:
                line[i] = (line[i] + left) & 255
            elif kind == 2:
                line[i] = (line[i] + up) & 255
            elif kind == 3:
                line[i] = (line[i] + (left + up) // 2) & 255
            elif kind == 4:
                p = left + up - corner
                pa, pb, pc = abs(p - left), abs(p - up), abs(p - corner)
                pred = left if pa <= pb and pa <= pc else (up if pb <= pc else corner)
                line[i] = (line[i] + pred) & 255
        rows.append(bytes(line))
        prev = line
    return width, height, [bytes(r[i:i + 3]) for r in rows[::4] for i in range(0, stride,
                                                                                bpp * 4)]


def test_report_opens_in_headless_chromium(two_runs: tuple[Path, dict, dict],
                                           tmp_path: Path, report: CliCall) -> None:
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("headless Chromium is not installed (Debian package 'chromium'; "
                    ".ci/run installs it where apt-get is available)")
    folder, a, b = two_runs
    page = tmp_path / "page.html"
    assert report(folder, b["run_id"], "--vs", a["run_id"], "--out", str(page)).returncode == 0
    shot = tmp_path / "report.png"
    result = subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu",
                             f"--screenshot={shot}", "--window-size=1200,900",
                             page.resolve().as_uri()], capture_output=True, text=True,
                            timeout=180)
    assert shot.exists(), result.stderr[-2000:]
    width, height, pixels = png_pixels(shot)
    assert (width, height) == (1200, 900)
    background = max(set(pixels), key=pixels.count)
    drawn = sum(p != background for p in pixels) / len(pixels)
    assert len(set(pixels)) > 20 and drawn > 0.02, (len(set(pixels)), drawn)


# --------------------------------------------------------------------------- bad input


def test_report_refuses_a_run_whose_model_was_removed_or_edited(
        two_runs: tuple[Path, dict, dict], tmp_path: Path, run: CliCall,
        report: CliCall) -> None:
    folder, a, _ = two_runs
    source = folder / "results" / "kiln-line" / "runs" / a["run_id"]
    copy = tmp_path / "results" / "kiln-line" / "runs" / a["run_id"]
    shutil.copytree(source, copy)
    model = copy / "model.json"
    model.write_text(model.read_text().replace('"pseudo_count": 1.0', '"pseudo_count": 0.5'))
    out = tmp_path / "r.html"
    edited = report(tmp_path, a["run_id"], "--out", str(out))
    assert edited.returncode == 2 and "model.json" in edited.stderr
    assert "does not match the sha256" in edited.stderr and not out.exists()
    model.unlink()
    removed = report(tmp_path, a["run_id"], "--out", str(out))
    assert removed.returncode == 2 and "model file is missing" in removed.stderr
    exported = run("export", a["run_id"], "--format", "json", "--results",
                   str(tmp_path / "results"))
    assert exported.returncode == 2 and "model file is missing" in exported.stderr
    assert "Traceback" not in edited.stderr + removed.stderr + exported.stderr
    assert not out.exists()


def test_report_bad_arguments(two_runs: tuple[Path, dict, dict], report: CliCall) -> None:
    folder, a, _ = two_runs
    nowhere = report(folder, a["run_id"], "--out", str(folder / "no" / "such" / "r.html"))
    assert nowhere.returncode == 2 and "does not exist" in nowhere.stderr
    assert not (folder / "no").exists()
    unknown = report(folder, a["run_id"], "--vs", "19990101")
    assert unknown.returncode == 2 and "no run matches '19990101'" in unknown.stderr
    assert "Traceback" not in nowhere.stderr + unknown.stderr


def test_run_prints_the_report_command_and_the_default_path(
        two_runs: tuple[Path, dict, dict], tmp_path: Path, run: CliCall) -> None:
    folder = two_runs[0]
    shown = run("run", str(folder / "kiln-line.yaml"), "--results", str(tmp_path / "res"))
    assert shown.returncode == 0
    line = next(x for x in shown.stdout.splitlines() if x.startswith("report: "))
    command = line.removeprefix("report: dagmill ").split()
    made = run(*command, cwd=tmp_path)
    assert made.returncode == 0, made.stderr
    run_id = command[1]
    assert (tmp_path / f"report-{run_id}.html").is_file()
