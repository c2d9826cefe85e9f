"""The offline HTML report and the chart builders behind it, on the demo campaign in a real DuckDB file."""

from __future__ import annotations

import json
import re
from html.parser import HTMLParser

import markupsafe
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
from catalog.present import charts, report, trace_charts, tradeoff


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


def _specs(page):
    """Chart id → spec, read back from the JSON script elements as a browser's JSON.parse would."""
    found = re.findall(r'<script type="application/json" id="(chart-\d+)-spec">(.*?)</script>', page, flags=re.S)
    return {cid: json.loads(text) for cid, text in found}


def test_one_copy_of_the_javascript_for_every_chart(page):
    divs = re.findall(r'<div id="(chart-\d+)" data-spec="(chart-\d+)-spec"></div>', page)
    assert len(divs) >= 4 and all(a == b for a, b in divs)
    assert [a for a, _ in divs] == list(_specs(page))
    assert page.count("vegaEmbed(div, spec, options)") == 1  # one loop draws every chart
    # The bundle defines Vega-Embed once; a second copy would double the file size.
    assert page.count("// vega-embed") <= 1
    assert len(page) < 2 * len(vl_convert.javascript_bundle(vl_version=report._vegalite_version()))


def test_report_carries_caution_version_and_provenance(demo, page):
    db, res, (catalysts, trials, points) = demo
    caution = str(markupsafe.escape(CAUTION))
    assert page.count(caution) == 2  # at the top and in the hazard section
    assert page.index(caution) < page.index('id="ranking"')  # shown before any figure
    assert f"catalog {__version__}" in page
    assert res.data_stamp in page
    assert report.data_hash(catalysts, trials, points) in page
    assert str(markupsafe.escape(str(db))) in page


def _fields(spec):
    """Every field name a Vega-Lite spec encodes."""
    if isinstance(spec, dict):
        for key, value in spec.items():
            if key == "field" and isinstance(value, str):
                yield value
            else:
                yield from _fields(value)
    elif isinstance(spec, list):
        for item in spec:
            yield from _fields(item)


def _data_marks(svg: str) -> int:
    """Drawn data marks in a Vega SVG: shapes inside the groups Vega labels 'role-mark' (axes and legends have
    other roles)."""
    count = 0
    for chunk in svg.split('<g class="mark-')[1:]:
        kind, _, rest = chunk.partition('"')
        if " role-mark" in kind:
            body = rest.split("</g>", 1)[0]
            count += len(re.findall(r'd="M[^"]+"|<text|<circle', body))
    return count


def test_embedded_specs_compile_and_draw_marks(page):
    specs = _specs(page)
    assert len(specs) >= 4
    for cid, spec in specs.items():
        # Vega-Lite reads '[' and '.' in a field name as nested access, and the chart then draws nothing.
        assert all(re.fullmatch(r"[A-Za-z0-9_]+", f) for f in _fields(spec)), (cid, sorted(set(_fields(spec))))
        svg = vl_convert.vegalite_to_svg(spec, vl_version=report._vegalite_version())
        assert svg.startswith("<svg")
        assert _data_marks(svg) > 0, cid


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
    ids = list(res.trials.index[: trace_charts.MAX_TRACES])
    observed, fitted = trace_charts.trace_frames(res.trials, points, ids)
    assert len(observed) <= charts.MAX_ROWS and len(fitted) <= charts.MAX_ROWS
    assert set(observed["trial_id"]) <= set(ids)
    # The fitted curve starts at zero conversion: the offset is subtracted from data and fit alike.
    starts = fitted.groupby("trial_id")["progress"].first()
    np.testing.assert_allclose(starts, 0.0, atol=1e-9)
    chart = trace_charts.trace_chart(res.trials, points, ids)
    assert chart.to_dict()  # Altair's own row limit is not switched off, so this would raise if exceeded
    with pytest.raises(CatalogError, match="at most"):
        trace_charts.trace_frames(res.trials, points, list(res.trials.index[: trace_charts.MAX_TRACES + 1]))


def test_trace_in_amount_units_matches_the_fit(demo):
    _, res, (_, _, points) = demo
    tid = res.trials.index[res.trials["catalyst_id"].notna()][0]
    observed, _ = trace_charts.trace_frames(res.trials, points, [tid], normalise=False)
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


# ------------------------------------------------------------------------------------------------- hostile ids

HOSTILE_IDS = ["<!--", "</script><script>alert(1)</script>", "<img src=x onerror=alert(1)>", "a&b\u2028c\u2029"]


def _renamed(res, points, mapping):
    """The demo results with catalyst ids replaced, consistently in every table."""
    import dataclasses

    trials = res.trials.assign(catalyst_id=res.trials["catalyst_id"].replace(mapping))
    catalysts = res.catalysts.rename(index=mapping)
    flags = res.flags.assign(record_id=res.flags["record_id"].replace(mapping))
    return dataclasses.replace(res, trials=trials, catalysts=catalysts, flags=flags), points


def test_hostile_catalyst_ids_cannot_change_the_page(demo):
    _, res, (_, _, points) = demo
    ranked_before = _hand_ranking(res.catalysts)
    mapping = dict(zip(ranked_before.index[: len(HOSTILE_IDS)], HOSTILE_IDS, strict=True))
    hostile, points = _renamed(res, points, mapping)
    ranked = ranked_before.rename(index=mapping)
    page = report.render_report(hostile, ranked, 3, points, "db<!--", "0" * 64)
    clean = report.render_report(res, ranked_before, 3, points, "db", "0" * 64)
    parser = _Page()
    parser.feed(page)
    parser.close()
    assert parser.errors == []
    clean_parser = _Page()
    clean_parser.feed(clean)
    # Same elements, same scripts: the ids changed no structure.
    assert parser.ids == clean_parser.ids and len(parser.scripts) == len(clean_parser.scripts)
    for text in HOSTILE_IDS[:3]:
        assert text not in page
    # The safety caution survives, twice, and every chart still has its spec with the ids as data.
    assert page.count(str(markupsafe.escape(CAUTION))) == 2
    specs = _specs(page)
    assert len(specs) == len(_specs(clean))
    drawn = {r.get("catalyst_id") for spec in specs.values() for rows in spec.get("datasets", {}).values()
             for r in rows}
    assert set(HOSTILE_IDS[:3]) <= drawn


def test_script_json_escapes_what_could_end_a_script():
    text = report.script_json({"id": "</script><!--&\u2028\u2029"})
    for bad in ("<", ">", "&", "\u2028", "\u2029"):
        assert bad not in text
    assert json.loads(text) == {"id": "</script><!--&\u2028\u2029"}


def test_report_is_replaced_whole(demo, tmp_path):
    db, _, _ = demo
    target = tmp_path / "report.html"
    target.write_text("previous", encoding="utf-8")
    report.write_report(db, target, Settings(), top_k=2)
    assert target.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    assert [p.name for p in tmp_path.iterdir()] == ["report.html"]  # no temporary file left behind


def test_trade_off_chart_marks_transport_warnings_and_has_no_ea_axis(demo):
    _, res, _ = demo
    chart, words = report._trade_off_figure(res.catalysts, "tof", "EUR")
    spec = chart.to_dict()
    titles = json.dumps(spec)
    assert "price [EUR/g]" in titles and "Ea" not in titles.replace("EUR", "")
    rows = [r for data in spec["datasets"].values() for r in data if "warning" in r]
    warned = {r["catalyst_id"] for r in rows if r["warning"]}
    assert warned == set(tradeoff.transport_warnings(res.catalysts)) & {r["catalyst_id"] for r in rows}
    assert warned, "the demo has a transport-flagged catalyst"
    assert "transport warning" in words
