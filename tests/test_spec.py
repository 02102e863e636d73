"""Reading and checking spec files: every problem found, each with its file, line and key."""

from __future__ import annotations

import random
import tempfile
from pathlib import Path
from typing import Any

import pytest
import yaml
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.errors import InputError, Problem
from runner.spec import (
    Spec,
    check_spec_against_columns,
    load_spec,
    normalised_spec,
    spec_json_schema,
    spec_sha256,
)

# The example of the guide, section 1, without the keys later capabilities add (and so with
# its continuous column left out: continuous columns are one of them).
EXAMPLE = """\
name: kiln-line                  # lowercase letters, digits, '-'; names the results folder
dataset:
  path: ../datasets/kiln-line.csv
  sha256: null                   # optional pin: a different file stops the run (exit 2)
  missing: error                 # error | drop-rows
  columns:                       # optional; kind and state order per column
    supplier: {kind: discrete, states: [east, north, south]}
tiers:                           # optional; edges may go from an earlier tier to a later one,
  - [clay_lot, supplier]         # never back; a variable in no tier is unconstrained
  - [press_force, kiln_peak, dwell]
  - [crack, warp, shade]
  - [grade]
within_tier: allowed             # allowed | forbidden
forbidden:                       # directed pairs [from, to] that may never be edges
  - [supplier, grade]
required:                        # directed pairs that every learned graph must contain
  - [kiln_peak, crack]
parent_cap: 3                    # most parents any node may have
score:
  name: bic                      # loglik | aic | bic | bdeu | k2 (and gaussian-bic, later)
  ess: 1.0                       # equivalent sample size, bdeu only
search:
  method: hill-climb             # hill-climb | first-ascent | stochastic | tabu | order | exact
  start: empty                   # empty | required
  seed: 7
  restarts: 0                    # extra runs from perturbed starts; best one is kept
  tabu_tenure: 10                # tabu only: steps a reversed move stays forbidden
  budget:
    max_steps: 10000             # moves applied
    max_evaluations: null        # family scores computed
    max_seconds: 600             # wall clock; the best graph so far is kept
gate:                            # what `dagmill check` enforces against the pinned baseline
  score_tolerance: 1.0e-9        # relative drop in per-row score allowed before failing
  max_edge_changes: 0            # edges added + removed + reversed allowed (CPDAG level)
  allow_new_states: false        # a data drop with new or vanished states fails unless true
  graph: run                     # run | consensus (bootstrap consensus network)
"""

BASE = "name: case-one\ndataset:\n  path: data.csv\n"


def write(tmp_path: Path, text: str, name: str = "spec.yaml") -> str:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return str(path)


def problems_of(path: str) -> list[Problem]:
    with pytest.raises(InputError) as caught:
        load_spec(path)
    return caught.value.problems


def only(problems: list[Problem], key: str) -> Problem:
    found = [p for p in problems if p.key == key]
    assert len(found) == 1, (key, [p.format() for p in problems])
    return found[0]


# --------------------------------------------------------------------------- good specs


def test_guide_example_loads_with_defaults_lines_and_paths(tmp_path: Path) -> None:
    (tmp_path / "specs").mkdir()
    path = write(tmp_path / "specs", EXAMPLE)
    spec = load_spec(path)
    assert spec.name == "kiln-line"
    assert spec.gate.graph == "run"
    assert spec.gate.score_tolerance == 1e-9
    assert spec.search.budget.max_seconds == 600.0
    assert spec.dataset.max_states == 64
    assert spec.bootstrap is None
    assert spec.source_path == Path(path).resolve()
    assert spec.source_path.is_absolute()
    assert spec.dataset_path() == (tmp_path / "datasets" / "kiln-line.csv").resolve()
    assert spec.line_of("search.budget.max_steps") == 29
    assert spec.line_of("tiers.1.0") == 10
    assert spec.line_of("tiers[1][0]") == 10
    assert spec.line_of("required.0") == 17
    assert spec.line_of("search.budget.nothing_here") == 28
    assert spec.line_of("no_such_key") is None
    # tabu_tenure is given although the method is hill-climb: usable, with a warning
    assert [(w.key, w.severity) for w in spec.warnings] == [("search.tabu_tenure", "warning")]


def test_minimal_spec_fills_every_default(tmp_path: Path) -> None:
    spec = load_spec(write(tmp_path, BASE))
    data = normalised_spec(spec)
    assert data["score"] == {"alpha_mu": None, "alpha_w": None, "ess": 1.0, "name": "bic",
                             "prior_scale": None}
    assert data["search"]["method"] == "ges"  # the default under a score-equivalent score
    assert data["search"]["budget"] == {"max_evaluations": None, "max_seconds": 600.0,
                                        "max_steps": 10000}
    assert data["gate"] == {"allow_new_states": False, "max_edge_changes": 0, "graph": "run",
                            "score_tolerance": 1e-9, "evidence": 10.0}
    assert data["tiers"] == [] and data["parent_cap"] is None
    assert list(data) == sorted(data)
    assert spec.warnings == []


def test_yaml_words_like_on_and_yes_stay_text(tmp_path: Path) -> None:
    spec = load_spec(write(tmp_path, BASE + "tiers:\n  - [yes, no]\n  - [on, off]\n"
                                           "gate:\n  graph: run\n  score_tolerance: 1e-6\n"))
    assert spec.tiers == [["yes", "no"], ["on", "off"]]
    assert spec.gate.graph == "run"
    assert spec.gate.score_tolerance == 1e-6


def test_spec_is_frozen(tmp_path: Path) -> None:
    spec = load_spec(write(tmp_path, BASE))
    with pytest.raises(ValueError):
        spec.name = "other"  # type: ignore[misc]


# --------------------------------------------------------------------------- the file itself


def test_missing_file(tmp_path: Path) -> None:
    path = str(tmp_path / "nowhere.yaml")
    [problem] = problems_of(path)
    assert problem.file == path and problem.line is None
    assert "no such spec file" in problem.message


def test_folder_instead_of_file(tmp_path: Path) -> None:
    [problem] = problems_of(str(tmp_path))
    assert "folder" in problem.message


def test_file_given_as_relative_path_is_named_as_given(tmp_path: Path,
                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    write(tmp_path, BASE + "parent_cap: -1\n")
    monkeypatch.chdir(tmp_path)
    [problem] = problems_of("spec.yaml")
    assert problem.file == "spec.yaml"


@pytest.mark.parametrize("text", ["", "\n\n", "# only a comment\n", "---\n"])
def test_empty_file(tmp_path: Path, text: str) -> None:
    [problem] = problems_of(write(tmp_path, text))
    assert "empty" in problem.message


def test_not_utf8(tmp_path: Path) -> None:
    path = tmp_path / "spec.yaml"
    path.write_bytes(b"name: caf\xe9\n")
    [problem] = problems_of(str(path))
    assert "UTF-8" in problem.message


@pytest.mark.parametrize("text", ["- a\n- b\n", "just text\n", "42\n"])
def test_top_level_not_a_mapping(tmp_path: Path, text: str) -> None:
    [problem] = problems_of(write(tmp_path, text))
    assert "top level" in problem.message and "mapping" in problem.message
    assert problem.line == 1


def test_yaml_syntax_error_has_line(tmp_path: Path) -> None:
    path = write(tmp_path, "name: x\ndataset: [path: x\ntiers: []\n")
    [problem] = problems_of(path)
    assert problem.file == path
    assert problem.message.startswith("YAML syntax error")
    assert problem.line == 3


def test_two_documents_and_control_characters(tmp_path: Path) -> None:
    [two] = problems_of(write(tmp_path, BASE + "---\nname: other\n"))
    assert two.line == 4 and "single document" in two.message
    [control] = problems_of(write(tmp_path, BASE + "tiers: [[a\x00]]\n"))
    assert control.line == 4 and "U+0000" in control.message


def test_tab_indentation_is_a_syntax_error(tmp_path: Path) -> None:
    [problem] = problems_of(write(tmp_path, "name: x\ndataset:\n\tpath: d.csv\n"))
    assert problem.line == 3 and "YAML syntax error" in problem.message


def test_python_tags_are_refused_not_constructed(tmp_path: Path) -> None:
    text = BASE + "tiers: !!python/object/apply:os.system ['echo hi']\n"
    problem = only(problems_of(write(tmp_path, text)), "tiers")
    assert "python/object/apply:os.system" in problem.message
    assert problem.line == 4


def test_self_referring_alias(tmp_path: Path) -> None:
    problems = problems_of(write(tmp_path, BASE + "tiers: &loop [*loop]\n"))
    assert any("alias refers to itself" in p.message for p in problems)


def test_duplicate_keys(tmp_path: Path) -> None:
    text = BASE + "score:\n  name: bic\n  ess: 2.0\n  name: aic\nparent_cap: 2\nparent_cap: 3\n"
    problems = problems_of(write(tmp_path, text))
    score = only(problems, "score.name")
    assert score.line == 7 and "duplicate key 'name'" in score.message
    assert "line 5" in score.message
    cap = only(problems, "parent_cap")
    assert cap.line == 9 and "first given at line 8" in cap.message


# --------------------------------------------------------------------------- keys and values


def test_unknown_keys_at_every_depth_with_suggestions(tmp_path: Path) -> None:
    text = ("name: case-one\ndataset:\n  path: data.csv\n  colums: {}\n"
            "score:\n  nmae: bic\nsearch:\n  budget:\n    max_step: 5\n"
            "parent_capp: 2\nwhatever: 1\n")
    problems = problems_of(write(tmp_path, text))
    assert only(problems, "dataset.colums").message == \
        "unknown key 'colums'; did you mean 'columns'?"
    nmae = only(problems, "score.nmae")
    assert nmae.line == 6 and "did you mean 'name'?" in nmae.message
    step = only(problems, "search.budget.max_step")
    assert step.line == 9 and "did you mean 'max_steps'?" in step.message
    assert "did you mean 'parent_cap'?" in only(problems, "parent_capp").message
    other = only(problems, "whatever")
    assert other.line == 11 and "valid keys here" in other.message and "tiers" in other.message


def test_unknown_key_in_a_column(tmp_path: Path) -> None:
    text = BASE + "  columns:\n    supplier: {kind: discrete, state: [a, b]}\n"
    problem = only(problems_of(write(tmp_path, text)), "dataset.columns.supplier.state")
    assert problem.line == 5 and "did you mean 'states'?" in problem.message


def test_wrong_types(tmp_path: Path) -> None:
    text = BASE + ("parent_cap: many\nsearch:\n  seed: true\n  restarts: 1.5\n"
                   "gate:\n  allow_new_states: yes\n"
                   "tiers:\n  - [a, b]\n  - [3, c]\nscore: bic\n")
    problems = problems_of(write(tmp_path, text))
    cap = only(problems, "parent_cap")
    assert (cap.line, cap.value) == (4, "many") and "whole number" in cap.message
    seed = only(problems, "search.seed")  # a boolean is not an integer
    assert (seed.line, seed.value) == (6, True) and "whole number" in seed.message
    assert only(problems, "search.restarts").line == 7
    flag = only(problems, "gate.allow_new_states")
    assert flag.line == 9 and "true or false" in flag.message
    item = only(problems, "tiers.1.0")
    assert (item.line, item.value) == (12, 3) and "must be text" in item.message
    assert "mapping" in only(problems, "score").message


def test_out_of_range_values(tmp_path: Path) -> None:
    text = BASE + ("  max_states: 1\nparent_cap: -1\nscore:\n  ess: 0\n"
                   "search:\n  budget:\n    max_steps: 0\n    max_seconds: .inf\n")
    problems = problems_of(write(tmp_path, text))
    states = only(problems, "dataset.max_states")
    assert states.line == 4 and states.message == "must be at least 2" and states.value == 1
    cap = only(problems, "parent_cap")
    assert (cap.line, cap.message) == (5, "must be at least 0")
    assert "greater than 0" in only(problems, "score.ess").message
    assert only(problems, "search.budget.max_steps").line == 10
    assert "finite" in only(problems, "search.budget.max_seconds").message


def test_bad_enum_lists_allowed_values(tmp_path: Path) -> None:
    text = BASE + "  missing: skip\nscore:\n  name: bicc\nwithin_tier: never\n"
    problems = problems_of(write(tmp_path, text))
    score = only(problems, "score.name")
    assert score.line == 6 and score.value == "bicc"
    for allowed in ("'loglik'", "'bic'", "'bdeu'", "'k2'", "'gaussian-bic'"):
        assert allowed in score.message
    assert "did you mean 'bic'?" in score.message
    missing = only(problems, "dataset.missing")
    assert "'error', 'drop-rows'" in missing.message and missing.line == 4
    assert "'allowed', 'forbidden'" in only(problems, "within_tier").message


def test_missing_required_keys(tmp_path: Path) -> None:
    problems = problems_of(write(tmp_path, "dataset:\n  sha256: null\n"))
    assert only(problems, "name").message == "is required"
    path = only(problems, "dataset.path")
    assert path.message == "is required" and path.line == 1  # the line of its parent key


def test_name_and_hash_patterns(tmp_path: Path) -> None:
    text = "name: Kiln_Line\ndataset:\n  path: d.csv\n  sha256: ABC\n"
    problems = problems_of(write(tmp_path, text))
    assert "lowercase" in only(problems, "name").message
    assert "64 lowercase hexadecimal" in only(problems, "dataset.sha256").message


def test_pairs_and_tiers_shapes(tmp_path: Path) -> None:
    text = BASE + "tiers:\n  - [a]\n  - []\nforbidden:\n  - [a]\n  - [a, b, c]\n" \
                  "required:\n  - [b, b]\n"
    problems = problems_of(write(tmp_path, text))
    assert only(problems, "tiers.1").line == 6
    assert "at least 2" in only(problems, "forbidden.0").message
    assert "at most 2" in only(problems, "forbidden.1").message
    self_edge = only(problems, "required.0")
    assert self_edge.line == 11 and "two different variables" in self_edge.message


def test_column_options_fit_their_kind(tmp_path: Path) -> None:
    text = BASE + "  columns:\n    a: {states: [x, y, x], bins: 3}\n"
    problems = problems_of(write(tmp_path, text))
    assert "only applies to continuous" in only(problems, "dataset.columns.a.bins").message
    repeat = only(problems, "dataset.columns.a.states.2")
    assert repeat.line == 5 and "'x' is listed twice" in repeat.message


def test_sample_is_a_share_or_a_count(tmp_path: Path) -> None:
    for good in ("0.25", "1.0", "1", "40"):
        spec = load_spec(write(tmp_path, BASE + f"search:\n  sample: {good}\n"))
        assert spec.search.sample == yaml.safe_load(good)
    for bad in ("0", "1.5", "-3", "true", "lots"):
        problems = problems_of(write(tmp_path, BASE + f"search:\n  sample: {bad}\n"))
        assert only(problems, "search.sample").line == 5


# --------------------------------------------------------------------------- this version


def test_every_guide_section_is_available(tmp_path: Path) -> None:
    # Continuous columns, the Gaussian scores, bootstrap, fit and evaluation: the GUIDE's
    # later keys all load now (the binned column under a discrete score).
    text = BASE + ("  columns:\n    peak: {kind: continuous, bins: 4, binning: quantile}\n"
                   "bootstrap: {replicates: 10}\nfit: {pseudo_count: 1.0}\n"
                   "evaluation: {holdout: 0.2}\n")
    spec = load_spec(write(tmp_path, text))
    assert spec.bootstrap is not None and spec.fit is not None and spec.evaluation is not None
    assert spec.dataset.columns["peak"].kind == "continuous"
    gauss = load_spec(write(tmp_path, BASE + "score:\n  name: gaussian-bic\n"))
    assert gauss.score.name == "gaussian-bic"


def test_fit_and_evaluation_sections(tmp_path: Path) -> None:
    spec = load_spec(write(tmp_path, BASE + "fit: {pseudo_count: 0.5}\n"
                           "evaluation: {holdout: 0.2, seed: 5}\n"))
    assert spec.fit is not None and spec.fit.pseudo_count == 0.5
    assert spec.evaluation is not None and spec.evaluation.holdout == 0.2
    assert spec.evaluation.seed == 5
    # held-out rows could meet an unseen configuration: pseudo-count 0 would give -inf
    problems = problems_of(write(tmp_path, BASE + "fit: {pseudo_count: 0.0}\n"
                                 "evaluation: {holdout: 0.2}\n"))
    problem = only(problems, "fit.pseudo_count")
    assert problem.line == 4 and "-inf" in problem.message
    for bad, key in (("evaluation: {holdout: 1.0}", "evaluation.holdout"),
                     ("evaluation: {holdout: 0.0}", "evaluation.holdout"),
                     ("fit: {pseudo_count: -1.0}", "fit.pseudo_count")):
        assert only(problems_of(write(tmp_path, BASE + bad + "\n")), key).line == 4


def test_bootstrap_section_is_read_with_defaults(tmp_path: Path) -> None:
    spec = load_spec(write(tmp_path, BASE + "bootstrap: {replicates: 20}\n"
                           "gate: {graph: consensus}\n"))
    assert spec.bootstrap is not None
    assert (spec.bootstrap.replicates, spec.bootstrap.seed, spec.bootstrap.threshold) == (
        20, 0, 0.5)
    assert spec.gate.graph == "consensus"


@pytest.mark.parametrize(("text", "key", "words"), [
    ("bootstrap: {replicates: 0}\n", "bootstrap.replicates", "at least 1"),
    ("bootstrap: {replicates: -3}\n", "bootstrap.replicates", "at least 1"),
    ("bootstrap: {replicates: 5, threshold: 0}\n", "bootstrap.threshold", "greater than 0"),
    ("bootstrap: {replicates: 5, threshold: 1.5}\n", "bootstrap.threshold", "at most 1"),
    ("bootstrap: {threshold: 0.5}\n", "bootstrap.replicates", "is required"),
    ("gate: {graph: consensus}\n", "gate.graph", "needs a bootstrap section"),
])
def test_bad_bootstrap_settings_are_refused(tmp_path: Path, text: str, key: str,
                                            words: str) -> None:
    problem = only(problems_of(write(tmp_path, BASE + text)), key)
    assert words in problem.message and problem.line == 4


@pytest.mark.parametrize(("search", "key"), [
    ("tabu_tenure: 5", "search.tabu_tenure"),
    ("patience: 20", "search.patience"),
    ("sample: 0.5", "search.sample"),
    ("order: [a, b]", "search.order"),
    ("kick: 3", "search.kick"),
])
def test_parameters_the_method_ignores_are_warnings(tmp_path: Path, search: str,
                                                    key: str) -> None:
    path = write(tmp_path, BASE + f"search:\n  method: hill-climb\n  {search}\n")
    spec = load_spec(path)
    [warning] = spec.warnings
    assert (warning.file, warning.key, warning.line, warning.severity) == \
        (path, key, 6, "warning")
    assert "ignored" in warning.message


def test_kick_with_restarts_is_no_warning(tmp_path: Path) -> None:
    spec = load_spec(write(tmp_path, BASE + "search:\n  method: tabu\n  restarts: 2\n"
                                            "  kick: 3\n"))
    assert spec.warnings == []


def test_restarts_with_ges_is_a_warning(tmp_path: Path) -> None:
    """A whole-graph search (here the default, ges) is not restarted: restarts and kick
    are ignored, with a warning each."""
    spec = load_spec(write(tmp_path, BASE + "search:\n  restarts: 2\n  kick: 3\n"))
    assert spec.search.method == "ges"
    assert sorted(w.key for w in spec.warnings) == ["search.kick", "search.restarts"]


def test_defaults_are_not_warned_about(tmp_path: Path) -> None:
    spec = load_spec(write(tmp_path, BASE + "search:\n  patience: null\n  method: hill-climb\n"))
    assert spec.warnings == []


# --------------------------------------------------------------------------- constraints


def test_variable_in_two_tiers(tmp_path: Path) -> None:
    path = write(tmp_path, BASE + "tiers:\n  - [a, b]\n  - [c,\n     a]\n  - [d, d]\n")
    problems = problems_of(path)
    second = only(problems, "tiers.1.1")
    assert (second.file, second.line, second.value) == (path, 7, "a")
    assert "'a' is already in tier 1" in second.message and "line 5" in second.message
    twice = only(problems, "tiers.2.1")
    assert "'d' is already in tier 3" in twice.message


def test_tier_names_are_kept_only_when_given(tmp_path: Path) -> None:
    plain = load_spec(write(tmp_path, BASE + "tiers:\n  - [a]\n  - [b]\n"))
    assert "tier_names" not in normalised_spec(plain)  # older specs keep their hash
    named = load_spec(write(tmp_path, BASE + "tiers:\n  - [a]\n  - [b]\n"
                                             "tier_names: [raw, firing]\n", "named.yaml"))
    assert named.tier_names == ["raw", "firing"] and named.warnings == []
    assert normalised_spec(named)["tier_names"] == ["raw", "firing"]
    assert spec_sha256(named) != spec_sha256(plain)


def test_tier_names_need_one_distinct_name_per_tier(tmp_path: Path) -> None:
    path = write(tmp_path, BASE + "tiers:\n  - [a]\n  - [b]\n  - [c]\n"
                                  "tier_names: [raw, raw]\n")
    problems = problems_of(path)
    count = only(problems, "tier_names")
    assert (count.file, count.line) == (path, 8)
    assert "2 names for 3 tiers" in count.message and "line 4" in count.message
    repeated = only(problems, "tier_names.1")
    assert repeated.line == 8 and "'raw' already names tier 1" in repeated.message


def test_tier_messages_number_from_one_and_show_names(tmp_path: Path) -> None:
    text = (BASE + "tiers:\n  - [a, b]\n  - [c, a]\ntier_names: [raw, firing]\n"
            "required:\n  - [c, b]\n")
    problems = problems_of(write(tmp_path, text))
    repeat = only(problems, "tiers.1.1")
    assert "'a' is already in tier 1 (\"raw\")" in repeat.message
    back = only(problems, "required.0")
    assert "'c' is in tier 2 (\"firing\") and 'b' in the earlier tier 1 (\"raw\")" in \
        back.message


def test_required_edge_against_tiers(tmp_path: Path) -> None:
    text = BASE + "tiers:\n  - [a, b]\n  - [c, d]\nrequired:\n  - [a, c]\n  - [d, b]\n"
    problem = only(problems_of(write(tmp_path, text)), "required.1")
    assert problem.line == 9
    assert "d -> b" in problem.message and "tiers" in problem.message


def test_required_edge_within_forbidden_tier(tmp_path: Path) -> None:
    text = BASE + "tiers:\n  - [a, b]\nwithin_tier: forbidden\nrequired:\n  - [a, b]\n"
    problem = only(problems_of(write(tmp_path, text)), "required.0")
    assert problem.line == 8
    assert "a -> b" in problem.message and "within_tier: forbidden" in problem.message


def test_required_edge_also_forbidden(tmp_path: Path) -> None:
    text = BASE + "forbidden:\n  - [x, y]\n  - [a, c]\nrequired:\n  - [a, c]\n"
    problem = only(problems_of(write(tmp_path, text)), "required.0")
    assert problem.line == 8
    assert "a -> c is also forbidden" in problem.message and "line 6" in problem.message


def test_required_cycle(tmp_path: Path) -> None:
    text = BASE + "required:\n  - [x, y]\n  - [a, b]\n  - [b, c]\n  - [c, a]\n"
    [problem] = problems_of(write(tmp_path, text))
    assert problem.key == "required.1" and problem.line == 6
    assert "cycle: a -> b -> c -> a" in problem.message


def test_required_cycle_shown_is_a_shortest_one(tmp_path: Path) -> None:
    # a -> c -> d -> a is a cycle too; the message shows the shortest through 'a'
    text = BASE + "required:\n  - [a, c]\n  - [c, d]\n  - [d, a]\n  - [a, b]\n  - [b, a]\n"
    [problem] = problems_of(write(tmp_path, text))
    assert problem.message == "required edges form a cycle: a -> b -> a"
    assert problem.key == "required.3"


def test_two_separate_required_cycles(tmp_path: Path) -> None:
    text = BASE + "required:\n  - [a, b]\n  - [b, a]\n  - [p, q]\n  - [q, p]\n"
    messages = sorted(p.message for p in problems_of(write(tmp_path, text)))
    assert messages == ["required edges form a cycle: a -> b -> a",
                        "required edges form a cycle: p -> q -> p"]


def test_required_parents_over_cap(tmp_path: Path) -> None:
    text = BASE + "parent_cap: 1\nrequired:\n  - [a, c]\n  - [b, c]\n  - [a, b]\n"
    [problem] = problems_of(write(tmp_path, text))
    assert problem.key == "required.1" and problem.line == 7
    assert "'c' has 2 required parents (a, b)" in problem.message
    assert "parent_cap 1" in problem.message


def test_repeated_pairs_are_warnings(tmp_path: Path) -> None:
    text = BASE + "forbidden:\n  - [a, b]\n  - [a, b]\nrequired:\n  - [c, d]\n  - [c, d]\n"
    spec = load_spec(write(tmp_path, text))
    assert [(w.key, w.line, w.severity) for w in spec.warnings] == [
        ("forbidden.1", 6, "warning"), ("required.1", 9, "warning")]
    assert "listed twice in forbidden" in spec.warnings[0].message


# --------------------------------------------------------------------------- all at once


def test_five_different_mistakes_are_reported_together(tmp_path: Path) -> None:
    text = (
        "name: Bad Name\n"                       # 1 pattern
        "dataset:\n"
        "  path: data.csv\n"
        "  missing: sometimes\n"                 # 4 enum
        "score:\n"
        "  nmae: bic\n"                          # 6 unknown key
        "tiers:\n"
        "  - [a, b]\n"
        "  - [c, a]\n"                           # 9 variable in two tiers
        "required:\n"
        "  - [a, c]\n"
        "  - [c, a]\n"                           # 12 cycle
        "parent_cap: -2\n"                       # 13 range
        "parent_cap: 1\n"                        # 14 duplicate key
    )
    path = write(tmp_path, text)
    problems = problems_of(path)
    assert all(p.file == path and p.severity == "error" for p in problems)
    found = {(p.key, p.line) for p in problems}
    assert {("name", 1), ("dataset.missing", 4), ("score.nmae", 6), ("tiers.1.1", 9),
            ("parent_cap", 13), ("parent_cap", 14)} <= found
    assert any("cycle" in p.message for p in problems)
    assert [p.line for p in problems] == sorted(p.line or 0 for p in problems)


def test_a_broken_section_does_not_hide_other_rules(tmp_path: Path) -> None:
    text = BASE + "score:\n  name: 7\nsearch:\n  method: exactt\nrequired:\n  - [a, b]\n" \
                  "  - [b, a]\n"
    problems = problems_of(write(tmp_path, text))
    assert only(problems, "score.name").line == 5
    assert "must be one of" in only(problems, "search.method").message
    assert any("cycle" in p.message for p in problems)


# --------------------------------------------------------------------------- data columns


def test_check_against_columns_names_every_unknown_variable(tmp_path: Path) -> None:
    text = BASE + ("  columns:\n    supplierr: {states: [a]}\ntiers:\n  - [kiln_pek, crack]\n"
                   "forbidden:\n  - [crack, grade]\nrequired:\n  - [crack, zzz]\n")
    path = write(tmp_path, text)
    spec = load_spec(path)
    problems = check_spec_against_columns(spec, ["kiln_peak", "crack", "supplier", "grade"])
    by_key = {p.key: p for p in problems}
    assert set(by_key) == {"dataset.columns.supplierr", "tiers.0.0", "required.0.1"}
    peak = by_key["tiers.0.0"]
    assert (peak.file, peak.line, peak.value) == (path, 7, "kiln_pek")
    assert peak.message == "'kiln_pek' is not a column of data.csv; did you mean 'kiln_peak'?"
    assert by_key["dataset.columns.supplierr"].line == 5
    assert "its columns are" in by_key["required.0.1"].message
    named = check_spec_against_columns(spec, ["crack"], data_file="other.csv")
    assert all("of other.csv" in p.message for p in named)


def test_check_against_columns_clean(tmp_path: Path) -> None:
    spec = load_spec(write(tmp_path, BASE + "tiers:\n  - [a]\n  - [b]\n"))
    assert check_spec_against_columns(spec, ["a", "b", "c"]) == []


# --------------------------------------------------------------------------- schema


def test_json_schema_accepts_the_example_and_refuses_unknown_keys() -> None:
    jsonschema = pytest.importorskip("jsonschema")
    from runner.spec.loader import _SpecLoader

    schema = spec_json_schema()
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert schema["title"] and schema["description"]
    validator = jsonschema.Draft202012Validator(schema)
    validator.check_schema(schema)
    example = yaml.load(EXAMPLE, Loader=_SpecLoader)  # a SafeLoader subclass
    with_column = {**example, "dataset": {**example["dataset"], "columns": {
        **example["dataset"]["columns"],
        "kiln_peak": {"kind": "continuous", "bins": 4, "binning": "quantile"}}}}
    for data in (example, with_column):
        errors = [e.message for e in validator.iter_errors(data)]
        assert errors == []
    bad = {**example, "gate": {**example["gate"], "tolerance": 1}}
    assert not validator.is_valid(bad)
    assert not validator.is_valid({**example, "tires": []})
    assert not validator.is_valid({**example, "parent_cap": True})


def test_schema_fields_are_described() -> None:
    schema = spec_json_schema()
    for name, prop in schema["properties"].items():
        assert prop.get("description"), name
    for model, body in schema["$defs"].items():
        for name, prop in body["properties"].items():
            assert prop.get("description"), (model, name)


# --------------------------------------------------------------------------- hashing

FULL: dict[str, Any] = {
    "name": "hash-case",
    "dataset": {"path": "d.csv", "missing": "drop-rows", "max_states": 10,
                "columns": {"a": {"kind": "discrete", "states": ["x", "y"]},
                            "b": {"states": ["p", "q", "r"]}}},
    "tiers": [["a"], ["b", "c"]],
    "within_tier": "forbidden",
    "forbidden": [["c", "a"]],
    "required": [["a", "b"]],
    "parent_cap": 2,
    "score": {"name": "bdeu", "ess": 5.0},
    "search": {"method": "hill-climb", "start": "required", "seed": 3, "restarts": 1,
               "kick": 2, "budget": {"max_steps": 50, "max_seconds": 30.0}},
    "gate": {"score_tolerance": 0.001, "max_edge_changes": 1, "graph": "run"},
}


def shuffled(value: Any, rng: random.Random) -> Any:
    if isinstance(value, dict):
        keys = list(value)
        rng.shuffle(keys)
        return {k: shuffled(value[k], rng) for k in keys}
    if isinstance(value, list):
        return [shuffled(v, rng) for v in value]
    return value


def hash_of_text(text: str, seed: int | None = None) -> str:
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "spec.yaml"
        path.write_text(text, encoding="utf-8")
        return spec_sha256(load_spec(path), seed)


BASELINE = hash_of_text(yaml.safe_dump(FULL, sort_keys=True))


@settings(max_examples=40, deadline=None)
@given(order_seed=st.integers(min_value=0, max_value=2**32 - 1),
       flow=st.booleans())
def test_hash_is_stable_under_key_order(order_seed: int, flow: bool) -> None:
    text = yaml.safe_dump(shuffled(FULL, random.Random(order_seed)), sort_keys=False,
                          default_flow_style=flow)
    assert hash_of_text(text) == BASELINE


@settings(max_examples=40, deadline=None)
@given(seed_a=st.integers(min_value=0, max_value=10**9),
       seed_b=st.integers(min_value=0, max_value=10**9))
def test_hash_follows_the_seed_override(seed_a: int, seed_b: int) -> None:
    spec = Spec.model_validate(FULL)
    assert spec_sha256(spec, seed_a) == spec_sha256(spec, seed_a)
    assert (spec_sha256(spec, seed_a) == spec_sha256(spec, seed_b)) == (seed_a == seed_b)
    assert spec_sha256(spec, FULL["search"]["seed"]) == spec_sha256(spec)
    assert normalised_spec(spec, seed_a)["search"]["seed"] == seed_a


def test_defaults_written_out_hash_like_defaults_left_out(tmp_path: Path) -> None:
    short = load_spec(write(tmp_path, BASE, "a.yaml"))
    long = load_spec(write(tmp_path, BASE + "score:\n  name: bic\n  ess: 1\nparent_cap: null\n"
                                            "search:\n  budget:\n    max_seconds: 600\n",
                           "b.yaml"))
    assert spec_sha256(short) == spec_sha256(long)
    assert len(spec_sha256(short)) == 64


# --------------------------------------------------------------------------- no tracebacks

FRAGMENTS = st.sampled_from([
    "name: a-b\n", "dataset:\n  path: d.csv\n", "dataset: 3\n", "tiers:\n  - [a, b]\n",
    "tiers: [[]]\n", "required:\n  - [a, b]\n  - [b, a]\n", "forbidden: [[a, b], [a]]\n",
    "parent_cap: 0\n", "search: {method: tabu, sample: 2.5, kick: 0}\n", "score: {ess: .nan}\n",
    "gate: {on: yes}\n", "bootstrap: {}\n", "x: &a [*a]\n", "y: !!binary aGk=\n", "? [k]\n: v\n",
    "  bad indent\n", "- item\n", "[unclosed\n", "'\n", "\t\n", "name: x\nname: y\n",
    "dataset: {path: d.csv, columns: {c: {kind: continuous, states: [p, p]}}}\n", "\x00\n",
])


@settings(max_examples=150, deadline=None)
@given(parts=st.lists(FRAGMENTS, max_size=8), noise=st.text(max_size=20))
def test_any_text_gives_a_spec_or_located_problems(parts: list[str], noise: str) -> None:
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "spec.yaml"
        path.write_text("".join(parts) + noise, encoding="utf-8")
        try:
            load_spec(path)
        except InputError as exc:
            assert exc.problems
            assert all(p.file == str(path) and p.message for p in exc.problems)


def test_a_broken_bootstrap_does_not_hide_the_rest(tmp_path: Path) -> None:
    path = write(tmp_path, BASE + "tiers: [[a], [a]]\nbootstrap: {replicates: 0}\n")
    with pytest.raises(InputError) as caught:
        load_spec(path)
    keys = {p.key for p in caught.value.problems}
    assert {"bootstrap.replicates", "tiers.1.0"} <= keys
    assert isinstance(caught.value.partial_spec, Spec)  # the data can still be checked


def test_the_old_gate_key_on_is_refused_naming_gate_graph(tmp_path: Path) -> None:
    """`gate.on` was renamed `gate.graph` (a bare `on` is the boolean true in YAML 1.1,
    PyYAML's default, so editors' schema checks failed on a valid spec): the old key is
    bad input with a hint naming the new one, at its line."""
    spec = tmp_path / "s.yaml"
    spec.write_text("name: s\ndataset: {path: d.csv}\ngate:\n  on: consensus\n")
    with pytest.raises(InputError) as caught:
        load_spec(spec)
    (problem,) = [p for p in caught.value.problems if p.key == "gate.on"]
    assert problem.line == 4 and "renamed: use gate.graph" in problem.message
