"""Chart functions tested as specifications (to_dict), plus contour accuracy and export.

All project data here is invented.
"""
from __future__ import annotations

import json

import numpy as np
import numpy_financial as npf
import polars as pl
import pytest

from ratescape.report import charts

HOSTILE = '</script><script>window.__pwned=1</script><img src=x onerror="window.__pwned=2">'


def layer_data(spec: dict, layer: dict) -> list[dict]:
    """Rows of a (layer) spec, following a named dataset."""
    data = layer.get("data", spec.get("data"))
    if "values" in data:
        return data["values"]
    return spec["datasets"][data["name"]]


def round_trip(chart) -> dict:
    """to_dict, and the same dict back from JSON (Altair's own test pattern)."""
    spec = chart.to_dict()
    assert json.loads(chart.to_json()) == spec
    assert json.loads(json.dumps(spec, allow_nan=False)) == spec  # no NaN reaches the spec
    return spec


def pw_of(cost, benefit, life, rate, infl, nominal=False):
    """Independent PW via numpy-financial: -cost now, benefit at t = 1..life (grows with inflation if real)."""
    t = np.arange(1, life + 1)
    flows = np.concatenate([[-cost], benefit * (np.ones(life) if nominal else (1 + infl) ** t)])
    return npf.npv(rate, flows)


def curve_frame():
    rows = []
    for pid, name, cost in (("A1", "Pump station", 100.0), ("B2", HOSTILE, 150.0)):
        for f in (0.0, 0.03, 0.06):
            for i in np.linspace(0.0, 0.2, 11):
                rows.append((pid, name, float(i), f, pw_of(cost, 20.0, 10, i, f)))
    return pl.DataFrame(rows, schema=["project_id", "name", "discount_rate", "inflation", "present_worth"],
                        orient="row")


# ---------------------------------------------------------------------------
# view 1
# ---------------------------------------------------------------------------

def test_worth_curve_spec():
    frame = curve_frame()
    irr = pl.DataFrame({"project_id": ["A1", "A1", "B2"], "inflation": [0.0, 0.03, 0.0],
                        "irr_nominal": [0.1508, 0.1853, 0.0543]})
    spec = round_trip(charts.worth_curve(frame, irr))
    marks = [layer["mark"]["type"] for layer in spec["layer"]]
    assert marks == ["line", "point", "rule", "point"]
    line, _, zero, diamonds = spec["layer"]
    assert line["encoding"]["x"]["field"] == "discount_rate"
    assert line["encoding"]["y"]["field"] == "present_worth"
    assert line["encoding"]["color"]["field"] == "inflation"
    assert line["encoding"]["color"]["scale"]["scheme"] == "viridis"
    assert line["encoding"]["detail"]["field"] == "inflation"
    assert zero["encoding"]["y"] == {"datum": 0}
    assert diamonds["mark"]["shape"] == "diamond"
    assert diamonds["encoding"]["x"]["field"] == "irr_nominal"
    assert diamonds["encoding"]["y"] == {"datum": 0}
    assert {r["irr_nominal"] for r in layer_data(spec, diamonds)} == {0.1508, 0.1853, 0.0543}
    assert set(layer_data(spec, line)[0]) == {"project_id", "label", "discount_rate", "inflation", "present_worth"}
    assert "IRR" in spec["title"] and "discount rate" in spec["title"]
    # two projects: a dropdown bound to a parameter, filtering every data layer
    param = next(p for p in spec["params"] if p["name"] == "project")
    assert param["bind"]["input"] == "select" and param["bind"]["options"] == ["A1", "B2"]
    assert param["bind"]["labels"] == ["Pump station (A1)", f"{HOSTILE} (B2)"]
    assert line["transform"] == [{"filter": "(datum.project_id === project)"}]
    assert diamonds["transform"] == line["transform"]


def test_worth_curve_single_project_has_no_dropdown_and_drops_roots_off_the_grid():
    frame = curve_frame().filter(pl.col("project_id") == "A1")
    irr = pl.DataFrame({"project_id": ["A1", "A1"], "inflation": [0.0, 0.0], "irr_nominal": [0.15, 0.9]})
    spec = charts.worth_curve(frame, irr).to_dict()
    assert all(p["name"] != "project" for p in spec.get("params", []))
    assert [r["irr_nominal"] for r in layer_data(spec, spec["layer"][3])] == [0.15]


def test_worth_curve_real_axis_uses_real_irr():
    frame = curve_frame().rename({"discount_rate": "real_rate"})
    irr = pl.DataFrame({"project_id": ["A1"], "inflation": [0.0], "irr_real": [0.15]})
    spec = charts.worth_curve(frame, irr, x="real_rate").to_dict()
    assert spec["layer"][3]["encoding"]["x"]["field"] == "irr_real"


def test_missing_columns_are_named():
    with pytest.raises(ValueError, match=r"lacks column\(s\) \['present_worth'\]"):
        charts.worth_curve(curve_frame().drop("present_worth"))


def test_oversized_frame_error_gives_both_counts_and_the_fix():
    frame = pl.concat([curve_frame()] * 40)
    with pytest.raises(ValueError, match=r"has 2,640 rows but a chart takes at most 1,000\. Aggregate first"):
        charts.worth_curve(frame, max_rows=1000)


# ---------------------------------------------------------------------------
# contours and view 2
# ---------------------------------------------------------------------------

def test_contour_lines_on_a_plane_are_exact():
    # linear interpolation is exact on a plane, so every vertex satisfies z = level (common practice)
    x = np.linspace(0.0, 0.2, 21)
    y = np.linspace(0.0, 0.1, 11)
    z = 1000.0 - 4000.0 * x[None, :] + 2500.0 * y[:, None]
    lines = charts.contour_lines(x, y, z, [500.0, 700.0, 900.0])
    assert set(lines["level"].unique().to_list()) == {500.0, 700.0, 900.0}
    got = 1000.0 - 4000.0 * lines["x"].to_numpy() + 2500.0 * lines["y"].to_numpy()
    np.testing.assert_allclose(got, lines["level"].to_numpy(), atol=1e-9)
    # points are numbered in order along each line
    for _, g in lines.group_by("line"):
        assert g["point"].to_list() == list(range(g.height))


def test_contour_lines_refined_match_an_independent_present_worth():
    # PW over discount rate x inflation of an invented project with contract-fixed (nominal) costs and
    # real benefits; checked point by point with numpy-financial's npv (issue 4: to 1e-6 of scale).
    rates = np.linspace(0.02, 0.20, 10)
    infl = np.linspace(0.0, 0.10, 6)

    def pw(i, f):
        i, f = np.broadcast_arrays(np.asarray(i, float), np.asarray(f, float))
        t = np.arange(1, 16)
        real = 30.0 * np.sum(((1 + f[..., None]) / (1 + i[..., None])) ** t, axis=-1)
        nominal = -8.0 * np.sum((1 + i[..., None]) ** -t, axis=-1)
        return -180.0 + real + nominal

    z = pw(rates[None, :], infl[:, None])
    scale = np.abs(z).max()
    levels = [0.0, 50.0, 100.0]
    rough = charts.contour_lines(rates, infl, z, levels)
    fine = charts.contour_lines(rates, infl, z, levels, func=pw)
    assert fine.height == rough.height > 0

    def independent(frame):
        return np.array([
            npf.npv(i, np.concatenate([[-180.0], 30.0 * (1 + f) ** np.arange(1, 16) - 8.0]))
            for i, f in zip(frame["x"], frame["y"])
        ])

    err_fine = np.abs(independent(fine) - fine["level"].to_numpy()).max()
    err_rough = np.abs(independent(rough) - rough["level"].to_numpy()).max()
    assert err_fine <= 1e-6 * scale
    assert err_rough > 1e-6 * scale  # the refinement is what makes the points exact on this coarse grid


def test_contour_lines_closed_loop_repeats_first_point():
    x = np.linspace(-1, 1, 21)
    z = x[None, :] ** 2 + x[:, None] ** 2
    lines = charts.contour_lines(x, x, z, [0.5])
    assert lines["line"].n_unique() == 1
    first, last = lines.row(0, named=True), lines.row(-1, named=True)
    assert (first["x"], first["y"]) == pytest.approx((last["x"], last["y"]))
    np.testing.assert_allclose(np.hypot(lines["x"], lines["y"]), np.sqrt(0.5), rtol=0.03)


def test_contour_lines_rejects_bad_shapes():
    with pytest.raises(ValueError, match=r"\(3, 4\)"):
        charts.contour_lines(np.arange(4.0), np.arange(3.0), np.zeros((4, 3)), [0.0])
    with pytest.raises(ValueError, match="strictly increasing"):
        charts.contour_lines(np.array([0.0, 2.0, 1.0]), np.arange(2.0), np.zeros((2, 3)), [0.0])


def test_nice_levels_include_zero_when_straddling():
    assert 0.0 in charts.nice_levels(-130.0, 420.0).tolist()
    assert charts.nice_levels(1.0, 1.0).size == 0


def surface_frame(third=None):
    rows = []
    for i in np.linspace(0.0, 0.2, 11):
        for f in np.linspace(0.0, 0.1, 6):
            for m in (third or [None]):
                extra = [] if m is None else [m]
                rows.append((float(i), float(f), *extra, pw_of(100.0 * (m or 1.0), 20.0, 10, i, f, nominal=True)))
    cols = ["discount_rate", "inflation", *([] if third is None else ["cost_multiplier"]), "present_worth"]
    return pl.DataFrame(rows, schema=cols, orient="row")


def test_worth_surface_spec():
    frame = surface_frame()
    spec = round_trip(charts.worth_surface(frame, levels=[0.0, 20.0]))
    rect, lines, labels = spec["layer"]
    assert [rect["mark"]["type"], lines["mark"]["type"], labels["mark"]["type"]] == ["rect", "line", "text"]
    enc = rect["encoding"]
    assert (enc["x"]["field"], enc["x2"]["field"], enc["y"]["field"], enc["y2"]["field"]) == (
        "discount_rate_lo", "discount_rate_hi", "inflation_lo", "inflation_hi")
    assert enc["color"]["field"] == "present_worth"
    assert enc["color"]["scale"]["domain"][1] == 0.0  # near-white at zero in the middle
    assert enc["color"]["scale"]["range"] == ["#D55E00", "#F7F7F7", "#0072B2"]
    assert [t["field"] for t in enc["tooltip"]] == ["discount_rate", "inflation", "present_worth"]
    rows = layer_data(spec, rect)
    assert len(rows) == frame.height
    cell = rows[0]
    assert cell["discount_rate_lo"] < cell["discount_rate"] < cell["discount_rate_hi"]
    assert lines["encoding"]["detail"]["field"] == "line" and lines["encoding"]["order"]["field"] == "point"
    assert {r["level"] for r in layer_data(spec, lines)} == {0.0, 20.0}
    assert {r["text"] for r in layer_data(spec, labels)} == {"0", "20"}
    assert "equal worth" in spec["title"]


def test_worth_surface_slider_for_a_third_axis():
    frame = surface_frame(third=[0.9, 1.0, 1.1])
    spec = round_trip(charts.worth_surface(frame, slider="cost_multiplier", levels=[0.0]))
    param = next(p for p in spec["params"] if p["name"] == "third_axis")
    assert param["bind"]["input"] == "range"
    assert (param["bind"]["min"], param["bind"]["max"]) == (0.9, 1.1)
    assert param["bind"]["step"] == pytest.approx(0.1)
    for layer in spec["layer"]:
        assert "third_axis" in layer["transform"][0]["filter"]
    # contours traced separately per slice: each slice has its own zero line
    assert {r["cost_multiplier"] for r in layer_data(spec, spec["layer"][1])} == {0.9, 1.0, 1.1}


# ---------------------------------------------------------------------------
# view 3
# ---------------------------------------------------------------------------

def test_decision_map_spec():
    cells = pl.DataFrame({
        "discount_rate": [0.0, 0.1, 0.0, 0.1], "inflation": [0.0, 0.0, 0.05, 0.05],
        "preferred": ["Overhaul", "Replace", "Overhaul", HOSTILE],
        "runner_up": ["Replace", "Overhaul", "Replace", "Overhaul"], "margin": [12.0, 3.5, 8.0, 1.0]})
    frontier = pl.DataFrame({"alternative_a": ["Overhaul"] * 3, "alternative_b": ["Replace"] * 3,
                             "segment": [0, 0, 0], "point": [2, 0, 1],
                             "x": [0.07, 0.05, 0.06], "y": [0.05, 0.0, 0.025]})
    spec = round_trip(charts.decision_map(cells, frontier))
    rect, line = spec["layer"]
    assert rect["mark"]["type"] == "rect" and line["mark"]["type"] == "line"
    colour = rect["encoding"]["color"]
    assert colour["field"] == "preferred" and colour["type"] == "nominal"
    assert colour["scale"]["domain"] == sorted(["Overhaul", "Replace", HOSTILE])
    assert colour["scale"]["range"] == list(charts.CATEGORY_COLOURS[:3])
    assert "margin" in [t["field"] for t in rect["encoding"]["tooltip"]]
    assert [d["field"] for d in line["encoding"]["detail"]] == ["alternative_a", "alternative_b", "segment"]
    assert line["encoding"]["order"]["field"] == "point"
    assert [r["point"] for r in layer_data(spec, line)] == [0, 1, 2]  # sorted along the line
    assert any(p.get("bind") == "legend" for p in spec["params"])


# ---------------------------------------------------------------------------
# portfolio views
# ---------------------------------------------------------------------------

def test_acceptance_share_bars_sorted():
    s = pl.DataFrame({"project_id": ["a", "b", "c"], "name": ["Roof", "Boiler", HOSTILE],
                      "accept_share": [0.5, 1.0, 0.0]})
    spec = round_trip(charts.acceptance_share_bars(s))
    assert spec["mark"]["type"] == "bar"
    assert spec["encoding"]["y"]["sort"] == "-x"
    assert spec["encoding"]["x"]["field"] == "accept_share"
    rows = {r["project_id"]: r["acceptance"] for r in layer_data(spec, spec)}
    assert rows == {"a": "accepted in some scenarios", "b": "accepted everywhere", "c": "accepted nowhere"}


def test_acceptance_vs_inflation_spec():
    f = pl.DataFrame({"inflation": [0.0, 0.05, 0.0, 0.05], "discount_rate": [0.05, 0.05, 0.1, 0.1],
                      "accepted_count": [30, 20, 12, 9]})
    spec = round_trip(charts.acceptance_vs_inflation(f))
    line = spec["layer"][0]
    assert line["mark"]["type"] == "line"
    assert (line["encoding"]["x"]["field"], line["encoding"]["y"]["field"]) == ("inflation", "accepted_count")
    assert line["encoding"]["y"]["title"] == "Projects accepted"


def test_rank_intervals_spec():
    s = pl.DataFrame({"project_id": ["a", "b"], "rank_min": [1, 2], "rank_median": [1.5, 3.0],
                      "rank_max": [4, 7], "rank_base": [1, 3]})
    spec = round_trip(charts.rank_intervals(s))
    assert [layer["mark"]["type"] for layer in spec["layer"]] == ["rule", "tick", "point"]
    rule = spec["layer"][0]["encoding"]
    assert (rule["x"]["field"], rule["x2"]["field"]) == ("rank_min", "rank_max")
    assert rule["y"]["sort"] == {"field": "rank_median", "op": "min", "order": "ascending"}


def test_selection_share_bars_spec():
    f = pl.DataFrame({"project_id": ["a", "b"], "selected_share": [1.0, 0.25]})
    spec = round_trip(charts.selection_share_bars(f))
    assert spec["encoding"]["y"]["sort"] == "-x"
    assert {r["selection"] for r in layer_data(spec, spec)} == {"in every scenario (core)", "in some scenarios"}


def test_tornado_spec():
    f = pl.DataFrame({"project_id": ["a"] * 3, "input": ["MARR", "first cost", "life"],
                      "worth_low": [40.0, 25.0, 5.0], "worth_high": [-10.0, -5.0, 12.0], "base_worth": [10.0] * 3})
    spec = round_trip(charts.tornado(f))
    bars, rule = spec["layer"]
    assert bars["mark"]["type"] == "bar" and rule["mark"]["type"] == "rule"
    assert (bars["encoding"]["x"]["field"], bars["encoding"]["x2"]["field"]) == ("base_worth", "worth")
    assert bars["encoding"]["y"]["sort"] == {"field": "swing", "op": "max", "order": "descending"}
    swings = {(r["input"], r["setting"]): r["swing"] for r in layer_data(spec, bars)}
    assert swings[("MARR", "input at low value")] == 50.0 and swings[("life", "input at high value")] == 7.0


def test_spider_spec():
    f = pl.DataFrame({"input": ["MARR"] * 3 + ["life"] * 3, "pct_change": [-0.1, 0.0, 0.1] * 2,
                      "present_worth": [15.0, 10.0, 6.0, 7.0, 10.0, 12.0]})
    spec = round_trip(charts.spider(f))
    line = spec["layer"][0]
    assert line["mark"]["type"] == "line" and line["mark"]["point"] is True
    assert line["encoding"]["x"]["field"] == "pct_change"
    assert line["encoding"]["color"]["scale"]["domain"] == ["MARR", "life"]
    assert any(p.get("bind") == "legend" for p in line.get("params", []) + spec.get("params", []))


# ---------------------------------------------------------------------------
# export
# ---------------------------------------------------------------------------

def test_save_chart_formats(tmp_path):
    chart = charts.acceptance_share_bars(pl.DataFrame({"project_id": ["a"], "name": [HOSTILE],
                                                       "accept_share": [0.5]}))
    svg = charts.save_chart(chart, tmp_path / "c.svg").read_text()
    assert svg.lstrip().startswith("<svg") and "&lt;/script&gt;" in svg
    assert charts.save_chart(chart, tmp_path / "c.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    page = charts.save_chart(chart, tmp_path / "c.html").read_text()
    assert "<script src" not in page and "</script><script>window" not in page
    assert json.loads((charts.save_chart(chart, tmp_path / "c.json")).read_text())["mark"]["type"] == "bar"
    with pytest.raises(ValueError, match=r"\.html, \.png, \.svg or \.json"):
        charts.save_chart(chart, tmp_path / "c.pdf")


# ---------------------------------------------------------------------------
# the page: chart specifications wait, inert, until drawn (browser side: tests/browser)
# ---------------------------------------------------------------------------

def test_chart_specs_wait_in_inert_blocks_with_their_reserved_height():
    """Each chart is an empty element plus an application/json block (not run by the browser: WHATWG HTML,
    "the script element", a type that is not a JavaScript MIME type is a data block) holding its exact
    specification and the height kept for it: a fixed height plus 65 px of frame, or, for a
    {"step": s} height, s per distinct band value (Vega-Lite documentation, "Width and Height":
    a discrete axis with a step is step x number of values wide or tall)."""
    import re

    import altair as alt

    from ratescape.report.page import Section, build_report_html

    bars = charts.acceptance_share_bars(pl.DataFrame({
        "project_id": ["a", "b", "c", "d"], "name": ["Roof", "Boiler", HOSTILE, "Roof"],
        "accept_share": [0.5, 1.0, 0.0, 0.25]}))
    fixed = alt.Chart(pl.DataFrame({"x": [1, 2], "y": [2.0, 3.0]})).mark_line().encode(x="x:Q", y="y:Q") \
        .properties(height=300, width=400)
    page = build_report_html([Section("Bars", chart=bars), Section("Line", chart=fixed)], title="T")
    bars_spec = bars.to_dict()
    step = bars_spec["height"]["step"]
    labels = {r[bars_spec["encoding"]["y"]["field"]] for r in layer_data(bars_spec, bars_spec)}
    assert len(labels) == 4          # every project its own band, the duplicate name included
    for n, (chart, height) in enumerate(((bars, step * 4 + 65), (fixed, 300 + 65)), start=1):
        assert f'<div class="chart" id="chart-{n}"></div>' in page        # empty: nothing drawn by the writer
        block = re.search(rf'<script type="application/json" id="spec-{n}" data-chart="chart-{n}" '
                          rf'data-height="(\d+)">(.*?)</script>', page, re.S)
        assert block is not None
        assert int(block.group(1)) == height
        assert json.loads(block.group(2)) == chart.to_dict()
