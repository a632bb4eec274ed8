"""Charts build from real analyses of the demo data and convert to PNG and SVG."""
from __future__ import annotations

import xml.etree.ElementTree as ET

import numpy as np
import pandas as pd
import pytest

from engine import SchemeSpec, SweepSpec, analyse, learning_curve
from engine import charts as C
from engine.compare import fit_candidates
from engine.loading import load_table, prepare

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG signature, ISO/IEC 15948 section 5.2


def _analysed(path, target, inputs, scheme, max_order, order_column=None):
    table = load_table(path)
    data = prepare(table.frame, target, inputs, order_column=order_column)
    spec = SweepSpec(target, tuple(inputs), max_order=max_order, scheme=scheme)
    return data, spec, analyse(data, spec)


@pytest.fixture(scope="module")
def calibration(demo_dir):
    return _analysed(demo_dir / "calibration_curve.csv", "bath_temp_C", ["probe_mV"],
                     SchemeSpec("loo"), 8)


@pytest.fixture(scope="module")
def spectra(demo_dir):
    cols = [c for c in pd.read_csv(demo_dir / "wide_spectra.csv", nrows=1).columns
            if c.startswith("abs_")]
    return _analysed(demo_dir / "wide_spectra.csv", "analyte_mg_L", cols, SchemeSpec("kfold"), 1)


def _check_outputs(chart):
    png = C.chart_to_png(chart, scale=1)
    assert png[:8] == PNG_MAGIC
    assert len(png) > 2000
    svg = C.chart_to_svg(chart)
    root = ET.fromstring(svg)  # well-formed XML
    assert root.tag.endswith("svg")
    return svg


def _spec_text(chart) -> str:
    return chart.to_json()


def test_validation_curve_marks_cells_at_its_penalty(calibration):
    data, spec, a = calibration
    rec = a.recommendation
    chart = C.validation_curve_chart(a.validation, rec.recommended.penalty, rec.best,
                                     rec.recommended, "bath_temp_C")
    text = _spec_text(chart)
    assert "recommended" in text
    assert "°C²" in text  # unit read from the column name, squared for MSE
    svg = _check_outputs(chart)
    assert "Validation curve" in svg
    other = [p for p in a.spec.penalties if p not in (rec.best.penalty, rec.recommended.penalty)][0]
    chart2 = C.validation_curve_chart(a.validation, other, rec.best, rec.recommended,
                                      "bath_temp_C", metric="rmse")
    text2 = _spec_text(chart2)
    assert "is at another penalty" in text2
    assert "root mean squared error" in text2
    _check_outputs(chart2)


def test_validation_curve_rmse_values_are_roots_of_table(calibration):
    _, _, a = calibration
    rec = a.recommendation
    chart = C.validation_curve_chart(a.validation, 0.0, rec.best, rec.recommended,
                                     "bath_temp_C", metric="rmse")
    spec = chart.to_dict()
    values = []
    for layer in spec["layer"]:
        name = layer["data"]["name"]
        values.extend(r for r in spec["datasets"][name] if r.get("set") == "validation")
    got = {r["order"]: r["shown"] for r in values}
    t = a.validation[a.validation["penalty"] == 0.0]
    for _, row in t.iterrows():
        assert got[int(row["order"])] == pytest.approx(np.sqrt(row["validation_mse"]), rel=1e-12)


def test_heatmap_and_learning_curve(calibration):
    data, spec, a = calibration
    rec = a.recommendation
    heat = C.heatmap_chart(a.validation, rec.best, rec.recommended, "bath_temp_C")
    assert "lowest validation error" in _spec_text(heat)
    _check_outputs(heat)
    lc = learning_curve(data, spec, orders=[rec.recommended.order, 5])
    cells = [(rec.recommended.order, rec.recommended.penalty), (5, 0.0)]
    chart = C.learning_curve_chart(lc.table, cells, "bath_temp_C", note=lc.note)
    text = _spec_text(chart)
    assert "order 5, no penalty" in text
    _check_outputs(chart)


def test_comparison_one_input_draws_curves_past_range(calibration):
    data, spec, a = calibration
    models = fit_candidates(data, spec, [(1, 0.0), (2, 0.0), (8, 0.0)])
    chart = C.comparison_chart(data, models, "bath_temp_C")
    d = chart.to_dict()
    curves = [v for v in d["datasets"].values() if v and "prediction" in v[0]]
    assert curves
    xs = [r["x"] for r in curves[0]]
    assert min(xs) < data.X.min() and max(xs) > data.X.max()
    svg = _check_outputs(chart)
    assert "Fitted curves" in svg


def test_comparison_several_inputs_and_sampling(spectra):
    data, spec, a = spectra
    models = fit_candidates(data, spec, [(1, 0.0), (1, a.recommendation.recommended.penalty)])
    chart = C.comparison_chart(data, models, "analyte_mg_L", scatter_limit=25)
    text = _spec_text(chart)
    assert "random sample of 25 of 60 rows" in text
    _check_outputs(chart)


def test_coefficient_chart_and_steep_rule(calibration):
    _, _, a = calibration
    coef = a.sweep.coefficient_table()
    view = C.coefficient_view(coef, 8, 0.0)
    assert len(view) == 8  # 8 powers, intercept left out
    mags = view["magnitude"].to_numpy()
    for i, row in view.iterrows():
        med = np.median(np.delete(mags, i))
        assert row["steep"] == (row["magnitude"] > C.STEEP_RATIO * med)
    chart = C.coefficient_chart(coef, 8, 0.0, target="bath_temp_C")
    assert "more than 3 times the median" in _spec_text(chart)
    _check_outputs(chart)
    two = C.coefficient_view(coef, 2, 0.0)  # two terms: too few for the rule
    assert len(two) == 2 and not two["steep"].any()
    _check_outputs(C.coefficient_chart(coef, 0, 0.0))  # intercept only: a note, no bars


def test_units_and_names():
    assert C.column_units("bath_temp_C") == "°C"
    assert C.column_units("analyte_mg_L") == "mg/L"
    assert C.column_units("feed_flow_L_min") == "L/min"
    assert C.column_units("yield_pct") == "%"
    assert C.column_units("abs_400nm") is None
    assert C.plain_name("probe_mV") == "probe (mV)"
    assert C.plain_name("x", "kg") == "x (kg)"
    assert C.penalty_text(0) == "none"
    assert C.penalty_text(0.1) == "0.1"


def test_printed_pack_charts_are_valid_vega_lite(calibration):
    """The pack draws its printed copies without validating them again; this does
    (Altair checks the specification against the Vega-Lite JSON schema)."""
    from engine import pack

    data, spec, a = calibration
    cells = pack.compare_cells(a, None)
    models = fit_candidates(data, spec, cells)
    lc = learning_curve(data, spec, orders=sorted({q for q, _ in pack.learning_cells(cells)}))
    charts = pack.make_charts(a, lc.table, models, data, cells, lc.note)
    assert set(charts) == set(pack.CHART_FILES)
    for stem, chart in charts.items():
        printed = C.for_print(chart, 75)
        assert printed.to_dict(validate=True) == printed.to_dict(validate=False), stem


def test_prediction_band_is_cut_at_the_panel_edges_not_bent(demo_dir):
    # several inputs: the band about the line of perfect agreement is two straight edges
    # parallel to it; drawn clipped at the panel's edges, its values as computed
    from engine.intervals import band_table, how_sure
    data, spec, an = _analysed(demo_dir / "drifting_line_sensors.csv", "yield_pct",
                               ["inlet_temp_C", "jacket_temp_C", "feed_flow_L_min"],
                               SchemeSpec("kfold"), 2)
    rec = an.recommendation.recommended
    cell = (int(rec.order), float(rec.penalty))
    models = fit_candidates(data, spec, [cell])
    band = band_table(how_sure(an, data, spec), data)
    assert band["layout"].iloc[0] == "diagonal"
    assert np.allclose(np.diff(band["cvplus_high"] - band["x"]), 0.0)
    spec_dict = C.comparison_chart(data, models, "yield_pct", scatter_limit=50,
                                   band=band).to_dict()
    drawn = []

    def walk(node):
        if isinstance(node, dict):
            mark = node.get("mark")
            enc = node.get("encoding", {})
            if mark is not None and any(f in str(enc.get("y", {})) for f in
                                        ("cvplus_low", "analytic_low", "analytic_high")):
                drawn.append(mark)
            for v in node.values():
                walk(v)
        elif isinstance(node, list):
            for v in node:
                walk(v)

    walk(spec_dict)
    assert drawn and all(isinstance(m, dict) and m.get("clip") is True for m in drawn)
    values = [v for ds in spec_dict.get("datasets", {}).values() for v in ds
              if "cvplus_high" in v]
    assert sorted(v["cvplus_high"] for v in values) == sorted(band["cvplus_high"])
