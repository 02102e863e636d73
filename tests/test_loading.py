"""Loading that cannot hang or flood, and the streaming CSV reader.

* Spec and data paths must be regular files: a FIFO, a device or a folder is refused
  (exit 2, one line naming the file and what it is) before it is opened, in bounded time;
  a spec larger than the cap is refused by its size, unread.
* A data path outside the spec's project folder needs ``dataset.allow_outside: true``
  (``--data`` is not restricted).
* The streaming reader gives byte-identical results to the reader it replaced (kept in
  ``benchmarks/legacy_reader.py``): codes, states, kinds, values, dropped rows, warnings
  and every message with its line, on named cases (RFC 4180 quoting, BOM, CRLF, missing
  values, bad rows) and on random files (hypothesis), also with tiny read blocks so that
  every block boundary is exercised.
* Its two parsers of quote-free blocks, pyarrow's (the fast path, when pyarrow is
  installed) and pandas' (the exact path), give the same outcome, sha256 and messages
  included; the fast path is really taken on a well-formed file.
"""

from __future__ import annotations

import importlib.util
import math
import os
import subprocess
import sys
from collections.abc import Sequence
from pathlib import Path
from types import ModuleType
from typing import Any

import numpy as np
import pytest
from conftest import CliCall
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import runner.data
from runner.errors import InputError
from runner.spec.loader import MAX_SPEC_BYTES

ROOT = Path(__file__).resolve().parents[1]
CSV = "a,b,c\n" + "".join(f"{'xy'[i % 2]},{'pqr'[i % 3]},{'uv'[(i // 2) % 2]}\n"
                          for i in range(40))
SPEC = "name: load-case\ndataset:\n  path: {path}\n{extra}score:\n  name: bic\n"


def _legacy() -> ModuleType:
    """The reader this one replaced, frozen in ``benchmarks/legacy_reader.py``."""
    name = "dagmill_legacy_reader"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, ROOT / "benchmarks" / "legacy_reader.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    spec.loader.exec_module(module)
    return module


LEGACY = _legacy()


def outcome(load: Any, path: Path, **options: Any) -> Any:
    """Everything a reader returns, or every problem it raises, as plain comparable data."""
    try:
        ds = load(path, **options)
    except InputError as exc:
        return ("error", [(p.file, p.line, p.key, p.message, p.severity)
                          for p in exc.problems])
    values = None if ds.values is None else [
        [None if math.isnan(v) else v for v in row] for row in ds.values.tolist()]
    return ("ok", ds.path, ds.sha256, ds.names, ds.states, str(ds.codes.dtype),
            ds.codes.tolist(), ds.codes.flags["C_CONTIGUOUS"], ds.codes.flags["WRITEABLE"],
            ds.dropped_rows, [(w.file, w.line, w.key, w.message) for w in ds.warnings],
            ds.kinds, ds.kind_reasons, values)


def same_as_legacy(path: Path, **options: Any) -> Any:
    new = outcome(runner.data.load_dataset, path, **options)
    old = outcome(LEGACY.load_dataset, path, **options)
    assert new == old
    return new


@pytest.fixture(params=[runner.data.READ_BLOCK, 7, 64], ids=["block-8MiB", "block-7", "block-64"])
def block(request: pytest.FixtureRequest, monkeypatch: pytest.MonkeyPatch) -> int:
    """Read blocks of the shipped size, and tiny ones that split lines, quoted fields,
    CRLF pairs, multi-byte characters and the byte-order mark."""
    monkeypatch.setattr(runner.data, "READ_BLOCK", request.param)
    return int(request.param)


# --------------------------------------------------------------------------- equality


NAMED: dict[str, tuple[bytes, dict[str, Any]]] = {
    "plain": (CSV.encode(), {}),
    "quoted commas rfc4180": (
        b'a,b\r\n"x, y",1\r\n"say ""hi""",2\r\n"two\r\nlines",1\r\nplain,2\r\n', {}),
    "bom and crlf": (b"\xef\xbb\xbfa,b\r\nx,y\r\nz,y\r\n\r\n\r\n", {}),
    "bom quoted multi-line": (b'\xef\xbb\xbfa,b\n"p\nq",x\ny,"z,w"\n', {}),
    "missing values error": (b"a,b\nx,\nNA,y\nz,N/A\n,y\n", {}),
    "missing values dropped": (b"a,b\nx,\nNA,y\nz,q\n w ,y\n", {"missing": "drop-rows"}),
    "too few and too many fields": (b"a,b,c\nx,y,z\nx,y\nx,y,z,w\n\nx,y,z\n", {}),
    "many bad rows": (b"a,b\n" + b"x\n" * 40, {}),
    "crlf blank line": (b"a,b\r\nx,y\r\n\r\nz,w\r\n", {}),
    "bad rows after quotes": (b'a,b\n"q,q",x\ny\n"r\ns",x,z\n', {}),
    "unterminated quote": (b'a,b\nx,"y\nz,w\n', {}),
    "stray quote": (b'a,b\nx,"y"z\n', {}),
    "bare carriage return": (b"a,b\nx\ry,z\n", {}),
    "numbers as text": (b"a,b\n01,True\n1,true\n1.0,TRUE\n 1,False\n", {}),
    "continuous": (b"a,b\n" + b"".join(b"%d.5,%s\n" % (i, b"pq"[i % 2:i % 2 + 1])
                                        for i in range(80)), {}),
    "continuous with text": (b"a\n" + b"".join(b"%d\n" % i for i in range(80)) + b"x\n",
                             {"declared_kinds": {"a": "continuous"}}),
    "declared states": (b"s,b\neast,x\nwest,x\nWest,y\n", {
        "declared_states": {"s": ["east", "north"]}}),
    "declared na spelling": (b"a,b\nNA,y\nyes,y\nno,y\n", {
        "declared_states": {"a": ["yes", "no", "NA"]}}),
    "not utf8": (b"a,b\nx,y\nx,caf\xe9\n", {}),
    "utf8 cut at the end": (b"a,b\nx,caf\xc3", {}),
    "utf16": ("a,b\nx,y\n".encode("utf-16"), {}),
    "nul byte": (b"a,b\nx,\x00\n", {}),
    "empty": (b"  \r\n\n", {}),
    "header only": (b"a,b,c\n", {}),
    "blank header": (b" \nx\n", {}),
    "one column blank lines": (b"a\nx\n\n\r\ny\n", {}),
    "duplicate names": (b"a,b, a\nx,y,z\n", {}),
    "semicolons": (b"a;b\nx;y\n", {}),
    "too many states": (b"id,b\n" + b"".join(b"L%d,x\n" % i for i in range(70)), {}),
    "wide codes": (b"w\n" + b"".join(b"s%04d\n" % i for i in range(300)), {"max_states": 999}),
    "pin mismatch": (b"a,b\nx,y\n", {"expected_sha256": "0" * 64}),
    "pin mismatch and bad row": (b"a,b\nx\n", {"expected_sha256": "0" * 64}),
    "trailing spaces": (b"a,b\nx,y  \t\r\n \n", {}),
    "vertical tab at the end": (b"a,b\nx,y\n\x0b\n", {}),
}


@pytest.fixture(params=["pyarrow", "pandas"])
def parser(request: pytest.FixtureRequest, monkeypatch: pytest.MonkeyPatch) -> str:
    """Quote-free blocks parsed by pyarrow where it is installed (the fast path), or by
    pandas alone, as without pyarrow (the exact path)."""
    if request.param == "pandas":
        monkeypatch.setattr(runner.data, "_arrow_csv", lambda: None)
    elif runner.data._arrow_csv() is None:
        pytest.skip("pyarrow is not installed")
    return str(request.param)


@pytest.mark.parametrize("case", sorted(NAMED))
def test_named_cases_match_the_old_reader(tmp_path: Path, case: str, block: int,
                                          parser: str) -> None:
    data, options = NAMED[case]
    path = tmp_path / "data.csv"
    path.write_bytes(data)
    same_as_legacy(path, display_path="data.csv", **options)


def test_demo_data_matches_the_old_reader(tmp_path: Path) -> None:
    for name in ("kiln-line.csv", "kiln-gauss.csv"):
        path = ROOT / "datasets" / name
        if not path.exists():
            pytest.skip(f"datasets/{name} is not in this checkout")
        result = same_as_legacy(path)
        assert result[0] == "ok"


FIELD = st.lists(st.sampled_from([*'ab1 0.,"\r\né', "NA", "\ufeff", "True"]),
                 max_size=4).map("".join)


@st.composite
def csv_files(draw: st.DrawFn) -> bytes:
    width = draw(st.integers(1, 3))
    rows = draw(st.lists(st.lists(FIELD, min_size=max(0, width - 1), max_size=width + 1),
                         min_size=0, max_size=12))
    quote = draw(st.sampled_from(["minimal", "all", "none"]))
    end = draw(st.sampled_from(["\n", "\r\n"]))

    def cell(value: str) -> str:
        if quote == "all" or (quote == "minimal" and any(c in value for c in ',"\r\n')):
            return '"' + value.replace('"', '""') + '"'
        return value

    header = ",".join(f"c{j}" for j in range(width))
    text = header + end + "".join(",".join(cell(v) for v in row) + end for row in rows)
    if draw(st.booleans()):
        text = "\ufeff" + text
    text += draw(st.sampled_from(["", "\n", " \r\n\n"]))
    return text.encode("utf-8")


@settings(max_examples=int(os.environ.get("H8_EXAMPLES", "300")), deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=csv_files(), missing=st.sampled_from(["error", "drop-rows"]),
       size=st.sampled_from([5, 16, 1 << 20]))
def test_random_files_match_the_old_reader(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                           data: bytes, missing: str, size: int) -> None:
    monkeypatch.setattr(runner.data, "READ_BLOCK", size)
    path = tmp_path / "random.csv"
    path.write_bytes(data)
    same_as_legacy(path, missing=missing, max_states=6)


def test_blocks_do_not_change_a_larger_file(tmp_path: Path,
                                            monkeypatch: pytest.MonkeyPatch) -> None:
    rng = np.random.default_rng(4)
    words = np.array(["p", "q", "r s", "t,u", "01", "1", "NA", ""])
    rows = rng.choice(words, (3000, 4))
    lines = [",".join(f'"{v}"' if "," in v else v for v in row) for row in rows]
    path = tmp_path / "big.csv"
    path.write_text("a,b,c,d\n" + "\n".join(lines) + "\n", encoding="utf-8")
    monkeypatch.setattr(runner.data, "READ_BLOCK", 997)
    small = same_as_legacy(path, missing="drop-rows")
    monkeypatch.setattr(runner.data, "READ_BLOCK", 1 << 23)
    assert outcome(runner.data.load_dataset, path, missing="drop-rows") == small


def both_parsers(path: Path, monkeypatch: pytest.MonkeyPatch, **options: Any
                 ) -> tuple[Any, int]:
    """The outcome with the fast path (pyarrow) and how many blocks it encoded, after
    checking that the exact path (pandas alone) gives the same outcome."""
    if runner.data._arrow_csv() is None:
        pytest.skip("pyarrow is not installed")
    fast_blocks = 0
    encode_arrow = runner.data._BlockParser._encode_arrow

    def counted(self: Any, table: Any, part: bytes) -> None:
        nonlocal fast_blocks
        fast_blocks += 1
        encode_arrow(self, table, part)

    with monkeypatch.context() as patch:
        patch.setattr(runner.data._BlockParser, "_encode_arrow", counted)
        fast = outcome(runner.data.load_dataset, path, **options)
    with monkeypatch.context() as patch:
        patch.setattr(runner.data, "_arrow_csv", lambda: None)
        exact = outcome(runner.data.load_dataset, path, **options)
    assert fast == exact
    return fast, fast_blocks


def _mixed_file(rng: np.random.Generator, rows: int, end: str, bom: bool,
                bad_lines: Sequence[int] = ()) -> bytes:
    """Quote-free rows of four columns: short states, padded ones, missing spellings
    (``NA``, empty, ``null``, ``?``), numbers that pandas would merge (``01``/``1``),
    a byte-order mark opening a value; ``bad_lines`` (file lines) get three fields."""
    words = np.array(["p", "q", " r ", "01", "1", "1.0", "NA", "", "null", "?", "\ufeffs",
                      "True", "é"])
    cells = rng.choice(words, (rows, 4))
    lines = [",".join(row) for row in cells]
    for line in bad_lines:
        lines[line - 2] = "x,y,z"
    text = "a,b,c,d" + end + end.join(lines) + end
    return (("\ufeff" if bom else "") + text).encode("utf-8")


@pytest.mark.parametrize("end", ["\n", "\r\n"])
@pytest.mark.parametrize("missing", ["error", "drop-rows", "available-case"])
def test_fast_and_exact_parsers_agree_on_a_generated_file(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch, end: str, missing: str) -> None:
    path = tmp_path / "mixed.csv"
    path.write_bytes(_mixed_file(np.random.default_rng(8), 4000, end, bom=True))
    monkeypatch.setattr(runner.data, "READ_BLOCK", 4099)
    monkeypatch.setattr(runner.data, "ARROW_CHUNK", 300)  # pyarrow splits each block
    options: dict[str, Any] = {"missing": missing, "missing_values": ["NA", "", "?"],
                               "declared_states": {"d": ["p", "q", "r", "01", "1", "1.0",
                                                         "null", "\ufeffs", "True", "é"]}}
    result, fast_blocks = both_parsers(path, monkeypatch, **options)
    assert fast_blocks > 10  # the fast path read the file, block by block
    if missing != "error":
        assert result[0] == "ok"
        assert result[2] == runner.data.file_sha256(path)
        assert "NA" not in result[4][0] and "null" in result[4][0]
        assert "\ufeffs" in result[4][1]  # a mark opening a value is kept, in every block


def test_fast_and_exact_parsers_agree_on_bad_rows(tmp_path: Path,
                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    path = tmp_path / "bad.csv"
    bad = [2500, 2501, 2600, 3000, 3100, 3200, 3999]
    path.write_bytes(_mixed_file(np.random.default_rng(9), 4000, "\r\n", bom=False,
                                 bad_lines=bad))
    monkeypatch.setattr(runner.data, "READ_BLOCK", 8192)
    result, fast_blocks = both_parsers(path, monkeypatch, missing="drop-rows")
    assert fast_blocks >= 2  # the blocks before the first bad line
    assert result[0] == "error"
    messages = [p[3] for p in result[1]]
    assert messages[:5] == [f"line {n} has 3 fields, but the header has 4 fields"
                            for n in bad[:5]]
    assert messages[5] == "and 2 more lines with a different number of fields than the header (4)"


PLAIN_FIELD = st.lists(st.sampled_from([*"ab1 0.é\t", "NA", "\ufeff", "True", "\r"]),
                       max_size=4).map("".join)


@st.composite
def quote_free_files(draw: st.DrawFn) -> bytes:
    """Files the fast path reads: no quote and no lone CR (a CR drawn in a value is
    dropped), some lines with a wrong field count or blank."""
    width = draw(st.integers(1, 4))
    rows = draw(st.lists(st.lists(PLAIN_FIELD, min_size=max(0, width - 1),
                                  max_size=width + 1), min_size=1, max_size=30))
    end = draw(st.sampled_from(["\n", "\r\n"]))
    lines = [",".join(row).replace("\r", "") for row in rows]
    text = ",".join(f"c{j}" for j in range(width)) + end + "".join(line + end
                                                                   for line in lines)
    return (("\ufeff" if draw(st.booleans()) else "") + text).encode("utf-8")


@settings(max_examples=int(os.environ.get("H8_EXAMPLES", "300")), deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=quote_free_files(), missing=st.sampled_from(["error", "drop-rows"]),
       size=st.sampled_from([5, 16, 1 << 20]),
       spellings=st.sampled_from([None, ["NA"], ["a", ""]]))
def test_fast_and_exact_parsers_agree_on_random_files(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch, data: bytes, missing: str,
        size: int, spellings: list[str] | None) -> None:
    monkeypatch.setattr(runner.data, "READ_BLOCK", size)
    path = tmp_path / "random.csv"
    path.write_bytes(data)
    both_parsers(path, monkeypatch, missing=missing, max_states=6, missing_values=spellings)


def test_without_pyarrow_the_exact_path_reads(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setitem(sys.modules, "pyarrow.csv", None)  # an import of it fails
    assert runner.data._arrow_csv() is None


# --------------------------------------------------------------------------- files that are not


def _fifo(folder: Path, name: str) -> Path:
    if not hasattr(os, "mkfifo"):
        pytest.skip("no FIFOs on this system")
    path = folder / name
    os.mkfifo(path)
    return path


def _cli_subprocess(args: list[str], cwd: Path) -> subprocess.CompletedProcess[str]:
    """``python -m runner ARGS``, killed after 60 s: a hang fails the test, not the suite."""
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(ROOT), *sys.path])}
    env.pop("DAGMILL_RESULTS", None)
    return subprocess.run([sys.executable, "-m", "runner", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=60)


def test_a_spec_that_is_a_fifo_is_refused_without_waiting(tmp_path: Path) -> None:
    _fifo(tmp_path, "spec.yaml")
    result = _cli_subprocess(["validate", "spec.yaml"], tmp_path)
    output = result.stdout + result.stderr
    assert result.returncode == 2, output
    assert "Traceback" not in output
    assert "spec.yaml: is a FIFO (named pipe), not a spec file\n" in output


@pytest.mark.parametrize("device", ["/dev/zero", "/dev/urandom"])
def test_a_spec_that_is_a_device_is_refused(tmp_path: Path, device: str) -> None:
    if not Path(device).exists():
        pytest.skip(f"no {device}")
    result = _cli_subprocess(["validate", device], tmp_path)
    output = result.stdout + result.stderr
    assert result.returncode == 2, output
    assert "Traceback" not in output
    assert f"{device}: is a character device, not a spec file\n" in output


def test_a_data_file_that_is_a_fifo_or_device_is_refused(tmp_path: Path,
                                                         cli: CliCall) -> None:
    _fifo(tmp_path, "data.csv")
    (tmp_path / "spec.yaml").write_text(SPEC.format(path="data.csv", extra=""))
    (tmp_path / "zero.yaml").write_text(SPEC.format(path="/dev/zero",
                                                    extra="  allow_outside: true\n"))
    result = _cli_subprocess(["validate", "spec.yaml", "zero.yaml"], tmp_path)
    output = result.stdout + result.stderr
    assert result.returncode == 2, output
    assert "data.csv: dataset.path: is a FIFO (named pipe), not a CSV file" in output
    assert "/dev/zero: dataset.path: is a character device, not a CSV file" in output
    assert "Traceback" not in output


def test_a_data_path_that_is_a_folder(tmp_path: Path, cli: CliCall) -> None:
    (tmp_path / "data").mkdir()
    (tmp_path / "spec.yaml").write_text(SPEC.format(path="data", extra=""))
    result = cli("validate", "spec.yaml", cwd=tmp_path)
    assert result.returncode == 2
    assert "data: dataset.path: is a folder, not a CSV file" in result.stdout + result.stderr


def test_a_spec_folder_is_refused(tmp_path: Path, cli: CliCall) -> None:
    (tmp_path / "spec.yaml").mkdir()
    result = cli("validate", "spec.yaml", cwd=tmp_path)
    assert result.returncode == 2
    assert "spec.yaml: is a folder, not a spec file" in result.stdout + result.stderr


def _bytes_read() -> int:
    """Bytes this process has read through system calls so far (Linux ``rchar``)."""
    for line in Path("/proc/self/io").read_text().splitlines():
        if line.startswith("rchar:"):
            return int(line.split()[1])
    raise AssertionError("no rchar in /proc/self/io")


def test_a_huge_sparse_spec_is_refused_by_its_size_unread(tmp_path: Path,
                                                          cli: CliCall) -> None:
    if not Path("/proc/self/io").exists():
        pytest.skip("no /proc/self/io to count the bytes read")
    path = tmp_path / "spec.yaml"
    with path.open("wb") as handle:
        handle.truncate(2 << 30)  # 2 GiB, sparse: no disk used
    cli("validate", "missing.yaml", cwd=tmp_path)  # the command's imports, read beforehand
    before = _bytes_read()
    result = cli("validate", "spec.yaml", cwd=tmp_path)
    read = _bytes_read() - before
    assert result.returncode == 2
    assert (f"spec.yaml: the spec file is {2 << 30:,} bytes, more than the limit of "
            f"{MAX_SPEC_BYTES:,} bytes") in result.stdout + result.stderr
    assert read < 64 << 20  # not the file's 2 GiB (a late import may read a few MB)


def test_a_spec_at_the_cap_is_read(tmp_path: Path, cli: CliCall) -> None:
    (tmp_path / "data.csv").write_text(CSV)
    text = SPEC.format(path="data.csv", extra="")
    (tmp_path / "spec.yaml").write_text(text + "#" * (MAX_SPEC_BYTES - len(text) - 1) + "\n")
    assert (tmp_path / "spec.yaml").stat().st_size == MAX_SPEC_BYTES
    assert cli("validate", "spec.yaml", cwd=tmp_path).returncode == 0
    with (tmp_path / "spec.yaml").open("a") as handle:
        handle.write("#")
    result = cli("validate", "spec.yaml", cwd=tmp_path)
    assert result.returncode == 2 and "more than the limit" in result.stdout + result.stderr


# --------------------------------------------------------------------------- the project folder


def test_a_data_path_outside_the_project_needs_allow_outside(tmp_path: Path,
                                                            cli: CliCall) -> None:
    project, elsewhere = tmp_path / "project", tmp_path / "elsewhere"
    (project / "specs").mkdir(parents=True)
    elsewhere.mkdir()
    (elsewhere / "data.csv").write_text(CSV)
    spec = project / "specs" / "spec.yaml"
    spec.write_text(SPEC.format(path="../../elsewhere/data.csv", extra=""))
    result = cli("validate", "specs/spec.yaml", cwd=project)
    assert result.returncode == 2
    (line,) = [line for line in result.stdout.splitlines() if "dataset.path" in line]
    assert line.startswith("specs/spec.yaml:3: dataset.path: the data file ")
    assert str((elsewhere / "data.csv").resolve()) in line and "allow_outside" in line
    # the same file through a symlink inside the project: still outside
    (project / "link.csv").symlink_to(elsewhere / "data.csv")
    spec.write_text(SPEC.format(path="../link.csv", extra=""))
    assert cli("validate", "specs/spec.yaml", cwd=project).returncode == 2
    # allowed when the spec says so, or when the user names the file with --data
    spec.write_text(SPEC.format(path="../../elsewhere/data.csv",
                                extra="  allow_outside: true\n"))
    assert cli("validate", "specs/spec.yaml", cwd=project).returncode == 0
    spec.write_text(SPEC.format(path="/etc/hostname", extra=""))
    result = cli("run", "specs/spec.yaml", "--data", str(elsewhere / "data.csv"), "--results",
                 "r", cwd=project)
    assert result.returncode == 0, result.stderr


def test_the_project_folder_is_the_parent_of_the_spec_folder(tmp_path: Path,
                                                             cli: CliCall) -> None:
    (tmp_path / "datasets").mkdir()
    (tmp_path / "datasets" / "data.csv").write_text(CSV)
    for folder in ("specs", "analyses"):  # any name of the specs' folder
        (tmp_path / folder).mkdir()
        (tmp_path / folder / "spec.yaml").write_text(
            SPEC.format(path="../datasets/data.csv", extra=""))
        assert cli("validate", f"{folder}/spec.yaml", cwd=tmp_path).returncode == 0
    (tmp_path / "a" / "b").mkdir(parents=True)
    (tmp_path / "a" / "b" / "spec.yaml").write_text(
        SPEC.format(path="../../datasets/data.csv", extra=""))
    assert cli("validate", "a/b/spec.yaml", cwd=tmp_path).returncode == 2


def test_allow_outside_false_keeps_the_spec_hash(tmp_path: Path) -> None:
    from runner.spec import load_spec, normalised_spec, spec_sha256

    (tmp_path / "a.yaml").write_text(
        "name: load-case\ndataset:\n  path: d.csv\nscore:\n  name: bic\n")
    (tmp_path / "b.yaml").write_text(SPEC.format(path="d.csv", extra="  allow_outside: false\n"))
    (tmp_path / "c.yaml").write_text(SPEC.format(path="d.csv", extra="  allow_outside: true\n"))
    a, b, c = (spec_sha256(load_spec(tmp_path / f"{n}.yaml")) for n in "abc")
    assert a == b != c
    # absent from the normalised spec when false, so a spec without the key keeps the
    # hash it had before the key existed
    assert "allow_outside" not in normalised_spec(load_spec(tmp_path / "b.yaml"))["dataset"]
