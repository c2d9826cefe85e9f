"""Terminal text: long problem lists condensed (pure functions, no database)."""

from __future__ import annotations

from catalog.present import screen


def test_copies_of_one_message_collapse_after_a_few():
    lines = ["12 problem(s) found; nothing was written:"] + [
        f"  trials.csv, row {r}, column 'measurement': 'gasvolume' is not one of gas_volume, pressure"
        for r in range(2, 14)]
    out = screen.condense("\n".join(lines)).splitlines()
    assert out[0] == lines[0]
    assert out[1:4] == lines[1:4]
    assert out[4] == "  … and 9 more like this (rows 5–13)"
    assert len(out) == 5


def test_different_messages_are_kept_apart():
    text = "\n".join([
        "  trials.csv, row 2, column 'temperature [degC]': 5000 is above 1000 °C",
        "  trials.csv, row 3, column 'catalyst_mass [mg]': -1 must not be below 0",
        "  trials.csv, row 4, column 'temperature [degC]': 6000 is above 1000 °C",
    ])
    assert screen.condense(text) == text


def test_a_refused_header_hides_its_follow_on_row_problems():
    text = "\n".join([
        "3 problem(s) found:",
        "  trials.csv, row 1, column 'catalyst_mass [mL]': 'mL' is read as milliliter, but this column needs mass",
        "  trials.csv, row 2, column 'catalyst_mass [mL]': a catalysed trial needs the catalyst mass",
        "  trials.csv, row 3, column 'catalyst_mass [mL]': a catalysed trial needs the catalyst mass",
        "  traces.csv, row 2, column 'value': 'x' is not a finite number",
    ])
    out = screen.condense(text).splitlines()
    assert "needs the catalyst mass" not in "\n".join(out)
    assert out[2].strip().startswith("(2 follow-on problem(s)")
    assert out[3].startswith("  traces.csv, row 2")


def test_plain_messages_pass_unchanged():
    assert screen.condense("no database here yet: /tmp/x.duckdb") == "no database here yet: /tmp/x.duckdb"
