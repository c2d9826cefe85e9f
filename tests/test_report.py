"""The offline HTML report and the chart builders behind it, on the demo campaign in a real DuckDB file."""

from __future__ import annotations

import html
import json
import re
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
import vl_convert
from scipy.constants import R  # CODATA molar gas constant, J/(mol K)

from catalog import __version__, store
from catalog.analysis import results
from catalog.analysis.settings import Settings
from catalog.core.hazard import CAUTION
from catalog.errors import CatalogError
from catalog.present import charts, report


@pytest.fixture(scope="module")
def demo(demo_db):
    res = results.get_results(demo_db, Settings())
    return demo_db, res, store.load_campaign(demo_db)


@pytest.fixture(scope="module")
def page(demo, tmp_path_factory):
    db, _, _ = demo
    path = report.write_report(db, tmp_path_factory.mktemp("out") / "report.html", Settings(), top_k=3)
    return path.read_text(encoding="utf-8")


class _Page(HTMLParser):
    """Collects script tags, element ids and unclosed-tag errors while parsing."""

    VOID = {"meta", "br", "hr", "img", "input", "link", "col", "source", "wbr"}

    def __init__(self):
        super().__init__()
        self.scripts, self.ids, self.stack, self.errors = [], set(), [], []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "script":
            self.scripts.append(attrs)
        if "id" in attrs:
            self.ids.add(attrs["id"])
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else None}>")
            return
        self.stack.pop()


def _hand_ranking(catalysts: pd.DataFrame) -> pd.DataFrame:
    """A ranking by point TOF only, in the ranking module's layout, so the report is tested on its own."""
    ordered = catalysts.sort_values("tof_ref", ascending=False)
    n = len(ordered)
    rank = np.where(ordered["tof_ref"].notna(), np.arange(1, n + 1), np.nan)
    return pd.DataFrame({
        "rank": rank, "value": ordered["tof_ref"], "value_low": ordered["tof_ref_low"],
        "value_high": ordered["tof_ref_high"], "rank_low": rank, "rank_high": rank,
        "p_top_k": (rank <= 2).astype(float), "pareto": rank == 1, "excluded": False, "demoted": False, "note": ""},
        index=ordered.index)


# --------------------------------------------------------------------------------------------------- the report

def test_report_parses_and_has_every_section(page):
    parser = _Page()
    parser.feed(page)
    parser.close()
    assert parser.errors == []
    assert parser.stack == ["html"] or parser.stack == []
    for section in ("provenance", "settings", "ranking", "traces", "hazards", "flags", "methods"):
        assert section in parser.ids
    for heading in ("Catalyst screening report", "Arrhenius", "Methods", "Flags"):
        assert heading in page


def test_report_is_offline(page):
    parser = _Page()
    parser.feed(page)
    # No script is loaded from anywhere: every script tag is inline.
    assert all("src" not in attrs for attrs in parser.scripts)
    assert "cdn.jsdelivr" not in page
    assert not re.search(r"<script[^>]+src=", page)
    assert not re.search(r"<link[^>]+href=[\"']https?://", page)


def test_one_copy_of_the_javascript_for_every_chart(page):
    divs = re.findall(r'<div id="(chart-\d+)"></div>', page)
    calls = re.findall(r'vegaEmbed\("#(chart-\d+)"', page)
    assert len(divs) >= 4 and divs == calls
    # The bundle defines Vega-Embed once; a second copy would double the file size.
    assert page.count("// vega-embed") <= 1
    assert len(page) < 2 * len(vl_convert.javascript_bundle(vl_version=report._vegalite_version()))


def test_report_carries_caution_version_and_provenance(demo, page):
    db, res, (catalysts, trials, points) = demo
    assert html.escape(CAUTION) in page
    assert page.index(html.escape(CAUTION)) < page.index('id="ranking"')  # shown before any figure
    assert f"catalog {__version__}" in page
    assert res.data_stamp in page
    assert report.data_hash(catalysts, trials, points) in page
    assert html.escape(str(db)) in page


def test_embedded_specs_compile(page):
    specs = re.findall(r'vegaEmbed\("#chart-\d+", (.*?), \{"actions"', page)
    assert specs
    for text in specs:
        svg = vl_convert.vegalite_to_svg(json.loads(text.replace("<\\/", "</")),
                                         vl_version=report._vegalite_version())
        assert svg.startswith("<svg")


def test_report_with_a_given_ranking_shows_its_shortlist(demo, tmp_path):
    db, res, _ = demo
    ranked = _hand_ranking(res.catalysts)
    path = report.write_report(db, tmp_path / "given.html", Settings(), ranked=ranked, top_k=2)
    text = path.read_text(encoding="utf-8")
    for cid in ranked.index[:2]:
        assert f"{cid}: conversion" in text
    assert f"{ranked.index[2]}: conversion" not in text


def test_report_path_must_be_html(demo, tmp_path):
    db, _, _ = demo
    with pytest.raises(CatalogError, match=r"\.html"):
        report.write_report(db, tmp_path / "report.pdf", Settings())


def test_data_hash_ignores_row_order_and_sees_changes(demo):
    _, _, (catalysts, trials, points) = demo
    reference = report.data_hash(catalysts, trials, points)
    assert re.fullmatch(r"[0-9a-f]{64}", reference)
    shuffled = [frame.sample(frac=1.0, random_state=1) for frame in (catalysts, trials, points)]
    assert report.data_hash(*shuffled) == reference
    changed = points.copy()
    changed.loc[changed.index[5], "value"] *= 1 + 1e-12
    assert report.data_hash(catalysts, trials, changed) != reference


# --------------------------------------------------------------------------------------------------- the charts

def test_arrhenius_lines_agree_with_the_catalyst_table(demo):
    _, res, _ = demo
    fitted = res.catalysts.index[res.catalysts["ea"].notna()]
    points, lines = charts.arrhenius_frames(res.trials, fitted, n_grid=200)
    for cid in fitted:
        line = lines[lines["catalyst_id"] == cid]
        # Slope of ln TOF against 1000/T is -Ea/(1000 R) (Arrhenius equation); rtol 1e-9.
        slope = np.polyfit(line["inv_t"], line["ln_tof"], 1)[0]
        assert slope == pytest.approx(-res.catalysts.loc[cid, "ea"] / (1000 * R), rel=1e-9)
        assert (line["ln_low"] <= line["ln_tof"]).all() and (line["ln_tof"] <= line["ln_high"]).all()
    # Every point of a catalyst is a trial of that catalyst with a positive TOF.
    assert set(points["trial_id"]) <= set(res.trials.index[res.trials["tof"] > 0])


def test_trace_frames_stay_inside_the_row_limit(demo):
    _, res, (_, _, points) = demo
    ids = list(res.trials.index[: charts.MAX_TRACES])
    observed, fitted = charts.trace_frames(res.trials, points, ids)
    assert len(observed) <= charts.MAX_ROWS and len(fitted) <= charts.MAX_ROWS
    assert set(observed["trial_id"]) <= set(ids)
    # The fitted curve starts at zero conversion: the offset is subtracted from data and fit alike.
    starts = fitted.groupby("trial_id")["progress"].first()
    np.testing.assert_allclose(starts, 0.0, atol=1e-9)
    chart = charts.trace_chart(res.trials, points, ids)
    assert chart.to_dict()  # Altair's own row limit is not switched off, so this would raise if exceeded
    with pytest.raises(CatalogError, match="at most"):
        charts.trace_frames(res.trials, points, list(res.trials.index[: charts.MAX_TRACES + 1]))


def test_trace_in_amount_units_matches_the_fit(demo):
    _, res, (_, _, points) = demo
    tid = res.trials.index[res.trials["catalyst_id"].notna()][0]
    observed, _ = charts.trace_frames(res.trials, points, [tid], normalise=False)
    # rmse is stored in mol; the residuals are in mmol (1 mmol = 1e-3 mol, SI prefix); a thinned subset of the
    # same residuals has an RMS of the same size (common practice, no source: within a factor 2).
    rms = float(np.sqrt(np.mean(observed["residual"] ** 2)))
    assert rms == pytest.approx(res.trials.loc[tid, "rmse"] * 1e3, rel=1.0)


def test_catalyst_charts_leave_out_missing_values(demo):
    _, res, _ = demo
    cats = res.catalysts.copy()
    gone = cats.index[0]
    cats.loc[gone, ["tof_ref", "enhancement_ref"]] = np.nan
    tof = charts.tof_bar_chart(cats, 308.15).to_dict()
    enh = charts.enhancement_chart(cats, threshold=2.0).to_dict()
    for spec in (tof, enh):
        rows = [r for data in spec["datasets"].values() for r in data if "catalyst_id" in r]
        assert gone not in {r["catalyst_id"] for r in rows}
    with pytest.raises(CatalogError, match="no results"):
        charts.tof_bar_chart(cats, 308.15, ["no-such-catalyst"])
    with pytest.raises(CatalogError, match="no catalyst figure"):
        charts.pareto_chart(cats, "ea", "nonsense", front=[])
