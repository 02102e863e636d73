"""Bad input through the command line: exit 2, the file and the key or column named,
no traceback, and nothing stored."""

from __future__ import annotations

from pathlib import Path

import pytest
from conftest import CliCall, ProcessCall

CSV = "a,b,c,d\n" + "".join(
    f"{'xy'[i % 2]},{'pqr'[i % 3]},{'uv'[(i // 2) % 2]},{'mn'[(i // 3) % 2]}\n" for i in range(60)
)

GOOD = {
    "name": "name: bad-case",
    "dataset": "dataset:\n  path: data.csv",
    "tiers": "tiers:\n  - [a, b]\n  - [c, d]",
    "score": "score:\n  name: bic",
}


def spec_text(**replace: str) -> str:
    blocks = {**GOOD, **replace}
    return "\n".join(v for v in blocks.values() if v) + "\n"


# (spec text, data text or None for the default, expected fragments of stderr)
CASES: dict[str, tuple[str, str | None, list[str]]] = {
    "yaml syntax": ("name: bad-case\ndataset: [path: x\n", None, ["spec.yaml:"]),
    "misspelt key": (spec_text(score="score:\n  nmae: bic"), None, ["spec.yaml:", "nmae", "name"]),
    "unknown top key": (spec_text() + "parent_capp: 2\n", None, ["parent_capp", "parent_cap"]),
    "wrong type": (spec_text() + "parent_cap: many\n", None, ["spec.yaml:", "parent_cap"]),
    "out of range": (spec_text() + "parent_cap: -1\n", None, ["spec.yaml:", "parent_cap"]),
    "bad enum": (spec_text(score="score:\n  name: bicc"), None, ["score.name", "bic"]),
    "unknown variable": (spec_text(tiers="tiers:\n  - [a, bb]\n  - [c, d]"), None,
                         ["spec.yaml:", "bb", "'b'"]),
    "variable in two tiers": (spec_text(tiers="tiers:\n  - [a, b]\n  - [c, a]"), None,
                              ["spec.yaml:", "'a'"]),
    "required against tiers": (spec_text() + "required:\n  - [c, a]\n", None,
                               ["spec.yaml:", "required", "tier"]),
    "required within forbidden tier": (
        spec_text() + "within_tier: forbidden\nrequired:\n  - [a, b]\n", None,
        ["spec.yaml:", "required", "within_tier"]),
    "required and forbidden": (spec_text() + "forbidden:\n  - [a, c]\nrequired:\n  - [a, c]\n",
                               None, ["spec.yaml:", "required", "forbidden"]),
    "required cycle": (spec_text(tiers="") + "required:\n  - [a, b]\n  - [b, c]\n  - [c, a]\n",
                       None, ["spec.yaml:", "cycle"]),
    "required over cap": (spec_text() + "parent_cap: 1\nrequired:\n  - [a, c]\n  - [b, c]\n",
                          None, ["spec.yaml:", "parent_cap", "'c'"]),
    "dataset missing": (spec_text(dataset="dataset:\n  path: nowhere.csv"), None, ["nowhere.csv"]),
    "sha256 pin": (spec_text(dataset="dataset:\n  path: data.csv\n  sha256: " + "ab" * 32), None,
                   ["data.csv", "sha256"]),
    "empty data": (spec_text(), "", ["data.csv", "empty"]),
    "header only": (spec_text(), "a,b,c,d\n", ["data.csv"]),
    "duplicate columns": (spec_text(tiers=""), "a,b,a\nx,y,z\n", ["data.csv", "'a'"]),
    "missing values": (spec_text(), "a,b,c,d\nx,p,u,m\nx,,u,n\ny,q,v,m\n",
                       ["data.csv", "'b'", "line 3"]),
    "too many states": (spec_text(tiers=""),
                        "a,b\n" + "".join(f"id{i},x\n" for i in range(100)),
                        ["data.csv", "'a'", "64"]),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_input_exits_2_naming_file_and_key(tmp_path: Path, case: str, cli: CliCall) -> None:
    spec, data, fragments = CASES[case]
    (tmp_path / "spec.yaml").write_text(spec)
    (tmp_path / "data.csv").write_text(CSV if data is None else data)
    for command in ("validate", "run"):
        result = cli(command, "spec.yaml", cwd=tmp_path)
        output = result.stdout + result.stderr
        assert result.returncode == 2, (command, output)
        assert "Traceback" not in output
        for fragment in fragments:
            assert fragment in output, (command, fragment, output)
    assert not (tmp_path / "results").exists()


@pytest.mark.parametrize("case", ["misspelt key", "missing values"])
def test_bad_input_in_a_separate_process(tmp_path: Path, case: str,
                                         cli_process: ProcessCall) -> None:
    # the same refusal from `python -m runner`: exit 2 from the interpreter, no traceback
    spec, data, fragments = CASES[case]
    (tmp_path / "spec.yaml").write_text(spec)
    (tmp_path / "data.csv").write_text(CSV if data is None else data)
    result = cli_process("run", "spec.yaml", cwd=tmp_path)
    output = result.stdout + result.stderr
    assert result.returncode == 2, output
    assert "Traceback" not in output
    assert all(fragment in output for fragment in fragments), output
    assert not (tmp_path / "results").exists()


def test_single_state_column_is_a_warning(tmp_path: Path, cli: CliCall) -> None:
    (tmp_path / "spec.yaml").write_text(spec_text(tiers=""))
    (tmp_path / "data.csv").write_text("a,b\n" + "x,p\nx,q\n" * 20)
    result = cli("validate", "spec.yaml", cwd=tmp_path)
    assert result.returncode == 0, result.stdout + result.stderr
    assert "'a'" in result.stderr
