"""runner.present.text: what the terminal shows, read back as a person would."""

from __future__ import annotations

import json
from pathlib import Path

from conftest import CliCall, write_numeric_case

#: Variable names far wider than the edge column used to be: two of 40 characters, and
#: two shorter ones so that the edges differ in length.
LONG = ["kiln_peak_temperature_reading_in_celsius", "press_force_at_the_forming_station_in_kn",
        "crack_found_at_final_inspection", "dwell_time"]


def _share_rows(text: str) -> list[str]:
    """The edge rows of ``show``'s bootstrap section (run edges and consensus edges)."""
    return [line for line in text.splitlines()
            if line.startswith("  ") and " -> " in line and "directed " in line]


def test_show_keeps_the_share_columns_aligned_with_long_names(tmp_path: Path,
                                                             cli: CliCall) -> None:
    assert [len(n) for n in LONG] == [40, 40, 31, 10]
    write_numeric_case(tmp_path, rows=400, names=LONG)
    columns = "".join(f"    {n}: {{kind: continuous, bins: 3}}\n" for n in LONG)
    (tmp_path / "long.yaml").write_text(
        f"name: long-names\ndataset:\n  path: data.csv\n  columns:\n{columns}"
        "score: {name: bic}\nsearch: {method: hill-climb}\n"
        "bootstrap: {replicates: 4, seed: 1, threshold: 0.5}\n", encoding="utf-8")
    done = cli("run", "long.yaml", "--workers", "1", "--json", "--results", "r", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    run_id = json.loads(done.stdout)["runs"][0]["run_id"]
    shown = cli("show", run_id, "--results", "r", cwd=tmp_path)
    assert shown.returncode == 0, shown.stderr
    rows = _share_rows(shown.stdout)
    assert len(rows) >= 2, shown.stdout  # run edges and consensus edges
    offsets = {row.index("directed ") for row in rows}
    assert len(offsets) == 1, "\n".join(rows)  # every share column starts at one offset
    start = offsets.pop()
    assert all(row[start - 1] == " " for row in rows)  # at least one space before it
    for row in rows:  # and the edge itself is shown whole before the gap
        edge = row[:start].strip()
        source, target = edge.split(" -> ")
        assert source in LONG and target in LONG
    # The family scores of the same run line up too: one column for the numbers.
    lines = shown.stdout.splitlines()
    first = lines.index("families (lowest first)") + 1
    families = lines[first:first + len(LONG)]
    assert len({len(line) - len(line.split()[-1]) for line in families}) == 1
