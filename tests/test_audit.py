"""The audit trail: sealed records and baselines, the chain of runs, ``dagmill verify``
and Ed25519 signatures.

Every tampering path named in the store's contract is tried on a copy of real stored runs
of the demo spec, and each must be caught, naming the file. Signatures are checked here
with the ``cryptography`` package's own API (``Ed25519PublicKey.verify``), independently
of ``runner.signing``; Ed25519 is RFC 8032.
"""

from __future__ import annotations

import base64
import itertools
import json
import shutil
import stat
from pathlib import Path
from typing import Any

import pytest
from conftest import CliCall, CliResult
from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric import ed25519

from runner.errors import InputError
from runner.present.text import baseline_changes
from runner.store import (
    baseline_path,
    baseline_sha256,
    dump_json,
    read_baseline,
    read_run,
    record_sha256,
    write_baseline,
)

REPO = Path(__file__).resolve().parents[1]
SEEDS = (1, 2, 3)


@pytest.fixture(scope="module")
def project(tmp_path_factory: pytest.TempPathFactory, cli_session: CliCall) -> Path:
    """The demo spec and data with three stored runs (seeds 1, 2, 3), the first pinned,
    all signed with a key made by ``dagmill keygen``."""
    root = tmp_path_factory.mktemp("audit")
    shutil.copytree(REPO / "specs", root / "specs")
    shutil.copytree(REPO / "datasets", root / "datasets")
    keys = cli_session("keygen", "keys", "--json", cwd=root)
    assert keys.returncode == 0, keys.stderr
    env = {"DAGMILL_SIGNING_KEY": json.loads(keys.stdout)["private_key"]}
    for seed in SEEDS:
        done = cli_session("run", "specs/kiln-line.yaml", "--seed", str(seed), "--quiet",
                           cwd=root, env=env)
        assert done.returncode == 0, done.stderr
    first = runs_of(root)[0].name  # seed 1
    assert cli_session("pin", first, cwd=root, env=env).returncode == 0
    return root


def runs_of(root: Path) -> list[Path]:
    """The demo spec's run folders in the order they were stored (along the chain of
    ``previous_record_sha256``; runs of the same second do not sort by time)."""
    folders = sorted((root / "results" / "kiln-line" / "runs").iterdir())
    docs = {f: json.loads((f / "run.json").read_text()) for f in folders}
    by_previous = {d.get("previous_record_sha256"): f for f, d in docs.items()}
    order, previous = [], None
    while previous in by_previous:
        order.append(by_previous[previous])
        previous = docs[order[-1]]["record_sha256"]
    return order + [f for f in folders if f not in order]


@pytest.fixture
def copy(project: Path, tmp_path: Path) -> Path:
    """A private copy of the project to tamper with."""
    target = tmp_path / "p"
    shutil.copytree(project, target)
    return target


def edit(path: Path, change: Any) -> dict[str, Any]:
    doc = json.loads(path.read_text())
    change(doc)
    path.write_text(dump_json(doc))
    return doc


def verify(cli: CliCall, root: Path, *extra: str) -> tuple[CliResult, dict[str, Any]]:
    done = cli("verify", "--json", *extra, cwd=root)
    assert done.returncode in (0, 1), done.stderr
    return done, json.loads(done.stdout)


def problems(report: dict[str, Any]) -> list[dict[str, str]]:
    return [p for spec in report["specs"] for p in spec["problems"]]


# --------------------------------------------------------------------------- the chain


def test_runs_form_a_chain_in_the_order_they_were_stored(project: Path) -> None:
    records = [read_run(folder) for folder in runs_of(project)]
    assert [r["seed"] for r in records] == list(SEEDS)
    assert records[0]["previous_record_sha256"] is None
    for earlier, later in itertools.pairwise(records):
        assert later["previous_record_sha256"] == earlier["record_sha256"]
    for record in records:
        assert record["format_version"] == 2
        assert record_sha256(record) == record["record_sha256"]


def test_an_untouched_project_verifies(project: Path, cli: CliCall) -> None:
    public = project / "keys" / "dagmill-signing-key.pub.pem"
    done, report = verify(cli, project, "--public-key", str(public))
    assert done.returncode == 0 and report["ok"], report
    (spec,) = report["specs"]
    assert spec["runs"] == len(SEEDS) and spec["sealed"] == len(SEEDS)
    assert spec["signed"] == len(SEEDS) and spec["baseline"].startswith("run ")
    text = cli("verify", "--public-key", str(public), cwd=project)
    assert text.returncode == 0 and "1 of 1 spec(s) verified" in text.stdout


def test_a_deleted_run_in_the_middle_of_the_chain_is_reported(copy: Path, cli: CliCall) -> None:
    middle, last = runs_of(copy)[1:]
    shutil.rmtree(middle)
    done, report = verify(cli, copy)
    assert done.returncode == 1
    (found,) = problems(report)
    assert found["file"].endswith(f"{last.name}/run.json")
    assert "the run stored before it is missing" in found["problem"]


def test_two_swapped_runs_are_reported(copy: Path, cli: CliCall) -> None:
    a, b = runs_of(copy)[1:]
    a.rename(a.with_name("swap"))
    b.rename(a)
    a.with_name("swap").rename(b)
    done, report = verify(cli, copy)
    assert done.returncode == 1
    named = {Path(p["file"]).parent.name for p in problems(report) if "swapped" in p["problem"]}
    assert named == {a.name, b.name}


def test_a_stripped_seal_is_caught_by_the_reader_and_by_verify(copy: Path,
                                                               cli: CliCall) -> None:
    last = runs_of(copy)[-1]
    edit(last / "run.json", lambda d: (d.pop("record_sha256"),
                                       d["score"].update(value=d["score"]["value"] + 1)))
    shown = cli("show", last.name, cwd=copy)
    assert shown.returncode == 2 and "Traceback" not in shown.stderr
    assert f"{last / 'run.json'}".replace(str(copy) + "/", "") in shown.stderr
    assert "record_sha256: field required" in shown.stderr
    # stripping the version too makes it read as a legacy record; verify still sees it
    edit(last / "run.json", lambda d: [d.pop(k) for k in
                                       ("format_version", "previous_record_sha256")])
    done, report = verify(cli, copy)
    assert done.returncode == 1
    assert any("runs were already chained" in p["problem"] and last.name in p["file"]
               for p in problems(report))


def test_an_edited_record_with_a_recomputed_seal_breaks_the_chain(copy: Path,
                                                                  cli: CliCall) -> None:
    middle = runs_of(copy)[1]

    def forge(doc: dict[str, Any]) -> None:
        doc["score"]["value"] += 1.0
        doc["record_sha256"] = record_sha256(doc)

    edit(middle / "run.json", forge)
    done, report = verify(cli, copy)
    assert done.returncode == 1
    assert any("the run stored before it is missing" in p["problem"]
               for p in problems(report))


# --------------------------------------------------------------------------- the baseline


def test_a_baseline_with_an_edited_score_is_refused(copy: Path, cli: CliCall) -> None:
    path = baseline_path(copy / "results", "kiln-line")
    edit(path, lambda d: d["score"].update(per_row=d["score"]["per_row"] + 0.5))
    with pytest.raises(InputError, match=r"baseline_sha256: .*edited by hand"):
        read_baseline(copy / "results", "kiln-line")

    def reseal(doc: dict[str, Any]) -> None:
        doc["baseline_sha256"] = baseline_sha256(doc)

    edit(path, reseal)  # even with its seal recomputed, it no longer matches its run
    with pytest.raises(InputError, match=r"does not agree with its pinned run \(differs in "
                                         r"score\)") as caught:
        read_baseline(copy / "results", "kiln-line")
    assert str(path) in str(caught.value)
    done = cli("check", "specs/kiln-line.yaml", "--quiet", cwd=copy)
    assert done.returncode == 2 and "baseline.json" in done.stderr


def test_a_baseline_whose_run_is_gone_is_refused(copy: Path, cli: CliCall) -> None:
    shutil.rmtree(runs_of(copy)[0])
    with pytest.raises(InputError, match="is no longer stored") as caught:
        read_baseline(copy / "results", "kiln-line")
    assert "baseline.json" in str(caught.value)
    done, report = verify(cli, copy)
    assert done.returncode == 1 and report["specs"][0]["baseline"] == "refused"


def test_a_baseline_pinned_to_another_run_than_it_names_is_refused(copy: Path) -> None:
    path = baseline_path(copy / "results", "kiln-line")
    other = read_run(runs_of(copy)[1])

    def point_elsewhere(doc: dict[str, Any]) -> None:
        doc["record_sha256"] = other["record_sha256"]
        doc["baseline_sha256"] = baseline_sha256(doc)

    edit(path, point_elsewhere)
    with pytest.raises(InputError, match="is not the run that was pinned"):
        read_baseline(copy / "results", "kiln-line")


def test_pinning_replaces_the_baseline_and_reports_the_change(copy: Path) -> None:
    results = copy / "results"
    first, second = (read_run(folder) for folder in runs_of(copy)[:2])
    old = read_baseline(results, "kiln-line")
    new, replaced, path = write_baseline(results, second, "2026-12-04T00:00:00Z")
    assert replaced == old and read_baseline(results, "kiln-line") == new
    assert new["run_id"] == second["run_id"] != first["run_id"]
    assert new["record_sha256"] == second["record_sha256"]
    lines = baseline_changes(old, new)
    assert lines[0] == f"replaces baseline {first['run_id']}"
    assert path.read_text().endswith("}\n") and not list(path.parent.glob(".*tmp"))


# --------------------------------------------------------------------------- signatures


def _public(root: Path) -> ed25519.Ed25519PublicKey:
    key = serialization.load_pem_public_key(
        (root / "keys" / "dagmill-signing-key.pub.pem").read_bytes())
    assert isinstance(key, ed25519.Ed25519PublicKey)
    return key


def test_signatures_verify_with_the_cryptography_api(project: Path) -> None:
    """Each record's and the baseline's signature, checked with ``cryptography`` directly
    over the 32 bytes of the document's own hash."""
    key = _public(project)
    raw = key.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
    import hashlib

    docs = [(read_run(f), "record_sha256") for f in runs_of(project)]
    docs.append((json.loads(baseline_path(project / "results", "kiln-line").read_text()),
                 "baseline_sha256"))
    for doc, hash_key in docs:
        sig = doc["signature"]
        assert sig["algorithm"] == "ed25519"
        assert sig["public_key_sha256"] == hashlib.sha256(raw).hexdigest()
        key.verify(base64.b64decode(sig["value"]), bytes.fromhex(doc[hash_key]))
        with pytest.raises(InvalidSignature):
            key.verify(base64.b64decode(sig["value"]), bytes.fromhex("0" * 64))


def test_a_record_signed_with_another_key_fails_verify(copy: Path, cli: CliCall) -> None:
    assert cli("keygen", "other", cwd=copy).returncode == 0
    env = {"DAGMILL_SIGNING_KEY": str(copy / "other" / "dagmill-signing-key.pem")}
    assert cli("run", "specs/kiln-line.yaml", "--seed", "9", "--quiet", cwd=copy,
               env=env).returncode == 0
    public = str(copy / "keys" / "dagmill-signing-key.pub.pem")
    done, report = verify(cli, copy, "--public-key", public)
    assert done.returncode == 1
    (found,) = problems(report)
    assert found["file"].endswith(f"{runs_of(copy)[-1].name}/run.json")
    assert found["problem"] == "signature: signed with another key"
    # an edited signature value under the right key id
    edit(runs_of(copy)[0] / "run.json", lambda d: d["signature"].update(
        value=base64.b64encode(b"\0" * 64).decode()))
    _, report = verify(cli, copy, "--public-key", public)
    assert any(p["problem"] == "signature: the signature does not match the content"
               for p in problems(report))


def test_an_unsigned_run_fails_verify_with_a_public_key(copy: Path, cli: CliCall) -> None:
    assert cli("run", "specs/kiln-line.yaml", "--seed", "8", "--quiet",
               cwd=copy).returncode == 0
    public = str(copy / "keys" / "dagmill-signing-key.pub.pem")
    done, report = verify(cli, copy, "--public-key", public)
    assert done.returncode == 1
    assert [p["problem"] for p in problems(report)] == ["signature: not signed"]
    assert verify(cli, copy)[0].returncode == 0  # without a key, the seals hold


def test_keygen_keeps_the_private_key_private_and_never_overwrites(tmp_path: Path,
                                                                    cli: CliCall) -> None:
    assert cli("keygen", "k", cwd=tmp_path).returncode == 0
    private = tmp_path / "k" / "dagmill-signing-key.pem"
    assert stat.S_IMODE(private.stat().st_mode) == 0o600
    before = private.read_bytes()
    again = cli("keygen", "k", cwd=tmp_path)
    assert again.returncode == 2 and "never overwrites" in again.stderr
    assert private.read_bytes() == before


def test_a_bad_signing_key_stops_before_any_learning(tmp_path: Path, cli: CliCall) -> None:
    shutil.copytree(REPO / "specs", tmp_path / "specs")
    shutil.copytree(REPO / "datasets", tmp_path / "datasets")
    (tmp_path / "key.pem").write_text("not a key\n")
    for value in ("key.pem", "missing.pem"):
        done = cli("run", "specs/kiln-line.yaml", cwd=tmp_path,
                   env={"DAGMILL_SIGNING_KEY": value})
        assert done.returncode == 2 and "DAGMILL_SIGNING_KEY" in done.stderr
        assert "Traceback" not in done.stderr
    assert not (tmp_path / "results").exists()
