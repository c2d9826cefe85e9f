"""Property tests of the ingest parsers: whatever the text, the outcome is typed SI values or located problems.

Pure functions only (no store): headers, cells, delimiters, whole catalysts and trials tables. The importer-level
fuzzing with a real DuckDB file is in tests/test_fuzz_import.py.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from catalog.core.measurements import MEASUREMENTS
from catalog.errors import CatalogError
from catalog.ingest.columns import CATALYST_COLUMNS, TRIAL_COLUMNS
from catalog.ingest.sources import RawTable, delimiter_problem, read_source
from catalog.ingest.tables import Found, check_column, map_headers
from catalog.ingest.validate import check_catalysts, check_trials
from catalog.units import parse_header

TEMPERATURE = next(c for c in TRIAL_COLUMNS if c.name == "temperature")
NAMES = [c.name for c in TRIAL_COLUMNS]
cell_text = st.one_of(
    st.text(max_size=12),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.sampled_from(["", " ", "nan", "NaN", "None", "inf", "-inf", "1e308", "-0", "0x10", "1,5", "true"]),
)


def _problems_are_located(problems, label, n_rows, headers):
    for p in problems:
        assert p.file == label
        assert p.row is None or 1 <= p.row <= n_rows + 1
        assert p.column is None or p.column in headers or p.column in NAMES + [c.name for c in CATALYST_COLUMNS]
        assert p.message.strip()


@settings(max_examples=300, deadline=None)
@given(st.floats(min_value=-123.0, max_value=726.0, allow_nan=False))
def test_plausible_celsius_reaches_kelvin_exactly(value):
    # 0 °C = 273.15 K by definition of the Celsius scale (SI Brochure, 9th ed., 2.3.4).
    si, problems = check_column("t.csv", [repr(value)], TEMPERATURE, Found(0, "temperature [degC]", 1.0, 273.15))
    assert not problems
    assert si[0] == value + 273.15


@settings(max_examples=300, deadline=None)
@given(st.floats(allow_nan=False, allow_infinity=False).filter(lambda v: not -123.15 <= v <= 726.85))
def test_implausible_celsius_is_refused_with_row_and_column(value):
    _, problems = check_column("t.csv", ["20", repr(value)], TEMPERATURE, Found(0, "temperature [degC]", 1.0, 273.15))
    assert [(p.row, p.column) for p in problems] == [(3, "temperature [degC]")]


@settings(max_examples=300, deadline=None)
@given(st.lists(cell_text, max_size=8), st.sampled_from(TRIAL_COLUMNS + CATALYST_COLUMNS))
def test_any_cell_text_gives_typed_values_or_located_problems(cells, column):
    header = column.name
    found = Found(0, header)
    values, problems = check_column("x.csv", cells, column, found)
    assert len(values) == len(cells)
    _problems_are_located(problems, "x.csv", len(cells), [header])
    if column.kind == "number":
        bad_rows = {p.row for p in problems}
        ok = np.array([i + 2 not in bad_rows for i in range(len(cells))], dtype=bool)
        finite_or_empty = np.isfinite(values) | np.isnan(values)
        assert finite_or_empty[ok].all()
    if column.kind in ("text", "id"):
        assert all(v is None or isinstance(v, str) for v in values)


header_names = st.one_of(st.sampled_from(NAMES), st.text(max_size=10))
units = st.one_of(st.none(), st.sampled_from(["degC", "K", "mg", "g", "kPa", "bar", "mL", "parsec", "", "[", "%"]))


@settings(max_examples=300, deadline=None)
@given(st.lists(st.tuples(header_names, units), max_size=10))
def test_header_mapping_never_raises_and_refuses_every_repeat(pairs):
    headers = [name if unit is None else f"{name} [{unit}]" for name, unit in pairs]
    found, problems, _ = map_headers("trials.csv", headers, TRIAL_COLUMNS)
    assert all(headers[at.position] == at.header for at in found.values())
    names = [parse_header(h).name for h in headers]
    for name in set(names) & set(NAMES):
        if names.count(name) > 1:
            assert any("appears twice" in p.message for p in problems)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.text(alphabet=st.characters(blacklist_characters=",;\t|\n\r"), min_size=1, max_size=8),
                min_size=2, max_size=6), st.sampled_from([";", "\t", "|"]))
def test_other_delimiters_are_named(names, delimiter):
    problem = delimiter_problem(delimiter.join(names), "trials.csv")
    assert problem is not None and problem.row == 1
    assert ("tab" if delimiter == "\t" else f"'{delimiter}'") in problem.message


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=200))
def test_any_bytes_as_a_catalysts_file_read_or_refused(data):
    with tempfile.TemporaryDirectory() as work:
        folder = Path(work)
        (folder / "catalysts.csv").write_bytes(data)
        (folder / "trials.csv").write_text("trial_id,temperature,measurement,signal_unit\nT1,30,gas_volume,mL\n")
        (folder / "traces.csv").write_text("trial_id,time,value\nT1,0,0\n")
        try:
            source = read_source(folder)
        except CatalogError as exc:
            assert str(exc).startswith("1 problem(s)") and "catalysts.csv" in str(exc)
            return
        checked = check_catalysts(source.catalysts)
        _problems_are_located(checked.problems, "catalysts.csv", len(source.catalysts), list(source.catalysts.headers))


TRIAL_HEADERS = ["trial_id", "catalyst_id", "temperature [degC]", "measurement", "signal_unit", "catalyst_mass [mg]",
                 "collected_over_water", "gas_temperature [degC]"]
trial_rows = st.fixed_dictionaries({
    "trial_id": st.sampled_from(["T1", "T2", "", "T1 "]),
    "catalyst_id": st.sampled_from(["", "C1", "ghost"]),
    "temperature [degC]": cell_text,
    "measurement": st.sampled_from([*MEASUREMENTS, "colour", ""]),
    "signal_unit": st.sampled_from(["mL", "g", "kPa", "mmol/L", "parsec", ""]),
    "catalyst_mass [mg]": cell_text,
    "collected_over_water": st.sampled_from(["", "yes", "no", "maybe"]),
    "gas_temperature [degC]": cell_text,
})


@settings(max_examples=100, deadline=None)
@given(st.lists(trial_rows, max_size=6), st.lists(st.sampled_from(["", "Pt", "Pd", "Xx", "nan"]), max_size=4))
def test_any_trials_and_metals_give_values_or_located_problems(rows, metals):
    trials = RawTable.from_rows("trials.csv", TRIAL_HEADERS, [[r[h] for h in TRIAL_HEADERS] for r in rows])
    checked = check_trials(trials, {"C1"})
    _problems_are_located(checked.problems, "trials.csv", len(rows), list(trials.headers))
    catalysts = RawTable.from_rows("catalysts.csv", ["catalyst_id", "metal"],
                                   [[f"C{i}", m] for i, m in enumerate(metals)])
    table = check_catalysts(catalysts).table
    # An empty cell is None, never NaN or "".
    assert all((m == "") == (v is None) for m, v in zip(metals, table["metal"], strict=True))
