"""The HTML report: well-formed, one SVG element per variable and per edge, nothing
fetched from elsewhere, text escaped, deterministic; opened in headless Chromium; bad input."""

from __future__ import annotations

import json
import re
import shutil
import struct
import subprocess
import zlib
from html.parser import HTMLParser
from pathlib import Path

import pytest
from conftest import CliCall, CliResult, demo_spec_with_holdout

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
    for legend in ("added in B", "removed in B", "reversed in B", "in both runs"):
        assert legend in words
    # the restarted run's trace: one line per run and the kicks between them
    series = re.findall(r'<polyline class="series"[^>]*><title>([^<]*)</title>', text)
    assert series.count("first run") == 1 and "restart 1" in series
    assert "kick: random moves before a restart" in series
    assert "held-out per row" in words
    assert_offline(text)


def test_text_is_escaped(tmp_path: Path, run: CliCall, report: CliCall) -> None:
    data = tmp_path / "odd.csv"
    data.write_text('"a<b>","c&d","e""f",g\n' + "".join(
        f"{i % 2},{(i // 2) % 2},{i % 3},{(i * 7) % 2}\n" for i in range(60)))
    spec = tmp_path / "odd.yaml"
    spec.write_text(f"name: odd\ndataset:\n  path: {data.name}\ntiers:\n  - ['a<b>']\n")
    stored = run("run", str(spec), "--results", str(tmp_path / "results"), "--json")
    assert stored.returncode == 0, stored.stderr
    run_id = json.loads(stored.stdout)["runs"][0]["run_id"]
    out = tmp_path / "odd.html"
    assert report(tmp_path, run_id, "--out", str(out)).returncode == 0
    text = out.read_text()
    checked = parse(text)
    assert "<b>" not in text and "a&lt;b&gt;" in text and "c&amp;d" in text
    assert 'data-name="e&quot;f"' in text
    assert {"a<b>", "c&d", 'e"f'} <= set(checked.text)


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
