"""The `catalog` command end to end on the demo campaign: rank columns, temperature units, report, clean errors."""

from __future__ import annotations

import csv

import pytest

from catalog.cli import main

REQUIRED = ["rank", "catalyst_id", "tof [1/s]", "tof_low [1/s]", "tof_high [1/s]", "ea [kJ/mol]", "ea_low [kJ/mol]",
            "ea_high [kJ/mol]", "rate_enhancement", "n_trials", "flags"]


def _rows(path):
    with open(path, newline="", encoding="utf-8") as handle:
        return list(csv.DictReader(handle))


def test_rank_writes_the_required_columns_with_one_row_per_catalyst(demo_db, tmp_path, capsys):
    out = tmp_path / "shortlist.csv"
    assert main(["rank", "--db", str(demo_db), "--temperature", "35", "--out", str(out), "--quiet"]) == 0
    rows = _rows(out)
    assert list(rows[0])[: len(REQUIRED)] == REQUIRED
    assert len(rows) == 12 and [r["rank"] for r in rows] == [str(i) for i in range(1, 13)]
    single = next(r for r in rows if r["catalyst_id"] == "RhAl-03")
    assert single["ea [kJ/mol]"] == "" and "single-temperature" in single["flags"]  # no made-up Ea
    assert "caution:" in capsys.readouterr().out


def test_temperature_with_a_unit_means_the_same_point(demo_db, tmp_path):
    celsius, kelvin = tmp_path / "c.csv", tmp_path / "k.csv"
    assert main(["rank", "--db", str(demo_db), "-T", "45", "--out", str(celsius), "--quiet"]) == 0
    assert main(["rank", "--db", str(demo_db), "-T", "318.15 K", "--out", str(kelvin), "--quiet"]) == 0
    assert [r["tof [1/s]"] for r in _rows(celsius)] == [r["tof [1/s]"] for r in _rows(kelvin)]


def test_report_and_analyse(demo_db, tmp_path, capsys):
    page = tmp_path / "report.html"
    assert main(["report", "--db", str(demo_db), "-T", "35", "--out", str(page), "--quiet"]) == 0
    assert page.stat().st_size > 100_000
    assert main(["analyse", "--db", str(demo_db), "-T", "35", "--quiet"]) == 0
    assert "blank (uncatalysed) model: Ea =" in capsys.readouterr().out


@pytest.mark.parametrize(
    "args,words",
    [
        (["rank", "-T", "warm"], "--temperature"),
        (["rank", "-T", "-300"], "absolute zero"),
        (["rank", "--metric", "colour"], "--metric"),
        (["rank", "--metric", "score"], "needs --weights"),
        (["rank", "--metric", "score", "--weights", "tof=x"], "NAME=NUMBER"),
        (["rank", "--out", "shortlist.pdf"], "should end in"),
        (["report", "--out", "report.txt"], "should end in"),
    ],
)
def test_bad_options_give_a_message_not_a_traceback(demo_db, capsys, args, words):
    assert main([*args, "--db", str(demo_db), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert words in err and "Traceback" not in err


def test_missing_database_is_explained(tmp_path, capsys):
    missing = tmp_path / "none.duckdb"
    assert main(["rank", "--db", str(missing), "--quiet"]) == 2
    assert "no database here yet" in capsys.readouterr().err
    assert not missing.exists()


def test_rank_table_fits_a_100_column_terminal(demo_db, capsys):
    assert main(["rank", "--db", str(demo_db), "--quiet"]) == 0
    out = capsys.readouterr().out
    assert max(len(line) for line in out.splitlines()) <= 100
    # Figures with their intervals rounded together, flags by title with the code beside.
    assert "rate enhancement" in out and "[s⁻¹]" in out
    assert "Measured at one temperature only (single-temperature)" in out


def test_rank_on_another_figure_shows_it_in_display_units(demo_db, capsys):
    assert main(["rank", "--db", str(demo_db), "--metric", "rate_per_mass", "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "rate per mass [mmol g⁻¹ h⁻¹]" in out
    assert max(len(line) for line in out.splitlines()) <= 100


def test_trials_show_measurement_kinds_in_plain_words(demo_db, capsys):
    assert main(["trials", "--db", str(demo_db)]) == 0
    out = capsys.readouterr().out
    assert "gas volume" in out and "gas_volume" not in out


def test_a_refused_header_does_not_cascade_and_repeats_collapse(tmp_path, capsys):
    from catalog.datasets.demo import demo_campaign
    from catalog.datasets.synth import write_campaign

    folder = tmp_path / "campaign"
    write_campaign(demo_campaign(), folder)
    trials = folder / "trials.csv"
    lines = trials.read_text(encoding="utf-8").splitlines()
    header = lines[0].replace("catalyst_mass [mg]", "catalyst_mass [mL]")
    body = [line.replace(",gas_volume,", ",gasvolume,") for line in lines[1:]]
    trials.write_text("\n".join([header, *body]) + "\n", encoding="utf-8")
    db = tmp_path / "x.duckdb"
    assert main(["import", str(folder), "--db", str(db), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err and not db.exists()
    assert "follow-on problem(s) in rows of this column left out" in err
    assert "needs the catalyst mass" not in err
    assert "more like this" in err
    assert err.count("is not one of") <= 3
    assert len(err.splitlines()) < 12


def test_pareto_column_weighs_activity_against_price_not_low_ea(demo_db, tmp_path):
    out = tmp_path / "s.csv"
    assert main(["rank", "--db", str(demo_db), "--out", str(out), "--quiet"]) == 0
    rows = {r["catalyst_id"]: r for r in _rows(out)}
    # The demo's transport-limited catalyst has the lowest Ea: on a TOF-against-Ea front it would look optimal.
    flagged = [c for c, r in rows.items() if "transport-ea" in r["flags"]]
    assert flagged and all(rows[c]["pareto"] == "False" for c in flagged)
