"""The dashboard, driven headless with Streamlit's AppTest."""
from __future__ import annotations

import io
import json
import zipfile

import numpy as np
import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

from engine import SchemeSpec, SweepSpec, analyse
from engine import charts as C
from engine.labels import CHARTS, TABLES, samples_per_parameter
from engine.pack import build_pack, pack_zip_bytes
from engine.loading import load_table, prepare
from engine.pack import CHART_FILES

TIMEOUT = 60


def _app(repo_root) -> AppTest:
    return AppTest.from_file(str(repo_root / "app.py"), default_timeout=TIMEOUT)


def _texts(at) -> str:
    parts = [m.value for m in at.markdown] + [c.value for c in at.caption]
    parts += [str(m.label) + " " + str(m.value) for m in at.metric]
    return "\n".join(parts).replace("\u2060", "")  # word joiners the escaper adds


def _recommended_heading(at) -> str:
    heads = [m.value for m in at.markdown if m.value.startswith("#### Recommended:")]
    assert len(heads) == 1, heads
    return heads[0].removeprefix("#### Recommended: ")


def _no_failures(at) -> None:
    assert not at.exception, [e.value for e in at.exception]
    assert not [e.value for e in at.error], [e.value for e in at.error]


def _engine_recommendation(path, target, inputs, scheme, max_order, order_column=None):
    table = load_table(path)
    data = prepare(table.frame, target, inputs, order_column=order_column)
    spec = SweepSpec(target, tuple(inputs), max_order=max_order, scheme=scheme)  # range from the data
    return analyse(data, spec).recommendation.recommended


def test_opens_on_a_demo_with_a_recommendation(repo_root, demo_dir):
    at = _app(repo_root).run()
    _no_failures(at)
    rec = _engine_recommendation(demo_dir / "calibration_curve.csv", "bath_temp_C",
                                 ["probe_mV"], SchemeSpec("loo"), 10)
    assert _recommended_heading(at) == C.cell_text(rec.order, rec.penalty)
    labels = [m.label for m in at.metric]
    assert "Samples per parameter" in labels and "Train–validation gap (MSE)" in labels
    spp = [m.value for m in at.metric if m.label == "Samples per parameter"][0]
    assert spp == f"{samples_per_parameter(24, rec.effective_df):.1f}"
    mse = [m.value for m in at.metric if m.label.startswith("Validation error")][0]
    assert mse.startswith(f"{rec.validation_mse:.4g}")
    assert "Leave-one-out" in _texts(at)
    # the data preview and load report are on the page
    assert any("24 rows × 2 columns" in m.value for m in at.markdown)


def test_changing_the_scheme_updates_the_recommendation(repo_root, demo_dir):
    at = _app(repo_root).run()
    at.selectbox(key="source_choice").set_value("demo:drift").run()
    _no_failures(at)
    path = demo_dir / "drifting_line_sensors.csv"
    inputs = ["inlet_temp_C", "jacket_temp_C", "feed_pressure_kPa", "feed_flow_L_min",
              "stirrer_speed_rpm", "coolant_flow_L_min"]
    blocked = _engine_recommendation(path, "yield_pct", inputs,
                                     SchemeSpec("blocked", folds=5, gap=40,
                                                order_column="minute"), 3, "minute")
    assert _recommended_heading(at) == C.cell_text(blocked.order, blocked.penalty)
    assert "Contiguous" in _texts(at) or "block" in _texts(at).lower()

    at.selectbox(key="scheme").set_value("kfold").run()
    _no_failures(at)
    shuffled = _engine_recommendation(path, "yield_pct", inputs,
                                      SchemeSpec("kfold", folds=5, order_column="minute"), 3,
                                      "minute")
    assert _recommended_heading(at) == C.cell_text(shuffled.order, shuffled.penalty)
    assert "Shuffled folds: 5 folds" in _texts(at)
    # shuffled folds flatter this serially dependent log (demo_data/README.md)
    assert shuffled.validation_mse < blocked.validation_mse
    rmse = [m.value for m in at.metric if m.label.startswith("Validation error")][0]
    assert rmse.startswith(f"{shuffled.validation_mse:.4g}")  # the default unit is MSE

    at.number_input(key="folds").set_value(3).run()
    _no_failures(at)
    assert "Shuffled folds: 3 folds" in _texts(at)


def test_bad_upload_shows_a_message_and_the_page_still_works(repo_root):
    at = _app(repo_root).run()
    # the uploader keeps its file as session_state["upload"] = (name, bytes)
    at.session_state["upload"] = ("readings.csv", b"\x00\x01\x02\xff\xfe binary \x00" * 50)
    at.run()
    assert not at.exception
    errors = [e.value for e in at.error]
    assert errors and "readings.csv" in errors[0]
    assert "Traceback" not in "\n".join(errors)
    assert not [m for m in at.markdown if m.value.startswith("#### Recommended:")]
    # the page is still usable: pick a demo and get a recommendation back
    at.selectbox(key="source_choice").set_value("demo:calibration").run()
    _no_failures(at)
    assert _recommended_heading(at)


def test_upload_is_kept_when_roles_change(repo_root):
    rng = np.random.default_rng(3)
    x = np.linspace(0, 10, 40)
    frame = pd.DataFrame({"dose_mg": x, "note": ["ok"] * 40,
                          "response_V": 1.5 + 0.8 * x - 0.05 * x ** 2 + rng.normal(0, 0.1, 40)})
    frame.loc[5, "response_V"] = np.nan  # one row to drop
    at = _app(repo_root).run()
    at.session_state["upload"] = ("dose.csv", frame.to_csv(index=False).encode())
    at.run()
    _no_failures(at)
    assert at.selectbox(key="target").value == "response_V"
    assert at.multiselect(key="inputs").value == ["dose_mg"]
    assert "39 of 40 rows used" in _texts(at)
    assert any("dropped" in w.value for w in at.warning)
    first = _recommended_heading(at)
    at.number_input(key="max_order").set_value(2).run()
    _no_failures(at)
    assert at.selectbox(key="source_choice").value == "upload"
    assert at.session_state["upload"][0] == "dose.csv"
    assert _recommended_heading(at)
    # a role that cannot work gives a message naming the column, not a traceback
    at.selectbox(key="target").set_value("dose_mg").run()
    at.multiselect(key="inputs").set_value([]).run()
    assert not at.exception
    assert any("input" in e.value.lower() for e in at.error)
    at.multiselect(key="inputs").set_value(["response_V"]).run()
    _no_failures(at)
    assert first  # the first request produced a recommendation too


def test_unexpected_failure_shows_an_apology_not_a_traceback(repo_root, monkeypatch):
    def broken(*args, **kwargs):
        raise RuntimeError("heat map exploded")

    monkeypatch.setattr(C, "heatmap_chart", broken)
    at = _app(repo_root).run()
    assert not at.exception
    errors = [e.value for e in at.error]
    assert len(errors) == 1 and errors[0].startswith("Sorry, something went wrong")
    assert "heat map exploded" in errors[0] and "Traceback" not in errors[0]
    # everything else is still drawn
    assert _recommended_heading(at)
    assert len(at.get("download_button")) >= 10


def test_download_buttons_for_every_chart_and_table(repo_root):
    at = _app(repo_root).run()
    _no_failures(at)
    buttons = at.get("download_button")
    labels = [b.proto.label for b in buttons]
    # one vocabulary: the page's chart titles and file names are the pack's
    for stem, title in CHARTS.items():
        assert f"{title} (PNG)" in labels, labels
        assert f"{title} (SVG)" in labels, labels
        assert stem in CHART_FILES
    for stem in ("validation_grid", "validation_per_split", "learning_curve",
                 "side_by_side_fits", "coefficients_cell"):
        assert f"{TABLES[stem]} (CSV)" in labels, labels


def test_view_changes_do_not_rerun_the_sweep(repo_root, monkeypatch):
    import engine

    at = _app(repo_root).run()
    calls = []
    real = engine.analyse

    def counting(*args, **kwargs):
        calls.append(1)
        return real(*args, **kwargs)

    monkeypatch.setattr(engine, "analyse", counting)
    at.radio(key="metric").set_value("rmse").run()
    _no_failures(at)
    assert any("root mean squared error" in c.proto.spec for c in at.get("vega_lite_chart"))
    assert calls == []


def test_trust_checks_and_meeting_pack(repo_root, tmp_path):
    at = _app(repo_root).run()
    heading = _recommended_heading(at)
    at.button(key="run_trust").click().run()
    _no_failures(at)
    texts = _texts(at)
    assert "Nested cross-validation." in texts and "ratio" in texts
    assert "Selection stability" in texts

    # the pack is one download button, built from what the page computed
    labels = [b.proto.label for b in at.get("download_button")]
    assert "Meeting pack (ZIP)" in labels
    request = dict(at.session_state["_pack_request"])
    for k in ("checks", "models", "learning"):
        if hasattr(request[k], "result"):
            request[k] = request[k].result()
    assert all(t is not None for t in request["trust"])  # nested CV and stability ran
    res = build_pack(tmp_path / "fitladder_pack", **request)
    blob = pack_zip_bytes(res.out_dir)
    with zipfile.ZipFile(io.BytesIO(blob)) as z:
        names = z.namelist()
        assert "fitladder_pack/summary.html" in names
        assert "fitladder_pack/validation_curve.png" in names
        assert "fitladder_pack/nested_cv.csv" in names
        assert "fitladder_pack/selection_stability.csv" in names
        summary = json.loads(z.read("fitladder_pack/summary.json"))
    rec = summary["recommended"]
    assert C.cell_text(rec["order"], rec["penalty"]) == heading
    assert summary["nested_cv"]["outer_mse"] > 0
    assert summary["selection_stability"]["repetitions"] > 0


def test_server_settings_keep_the_dashboard_local(repo_root):
    import tomllib

    from engine.loading import DEFAULT_MAX_BYTES

    cfg = tomllib.loads((repo_root / ".streamlit" / "config.toml").read_text())
    assert cfg["server"]["address"] == "127.0.0.1"
    assert cfg["server"]["headless"] is True
    assert cfg["browser"]["gatherUsageStats"] is False
    # the upload cap (MiB) matches what the loader accepts
    assert cfg["server"]["maxUploadSize"] * 1024 * 1024 == DEFAULT_MAX_BYTES


def test_decimal_comma_upload_reads_with_the_option(repo_root):
    # a semicolon file written with decimal commas, as spreadsheets in many locales save it
    rows = ["dose_mg;response_V"] + [f"{x:.1f};{1.5 + 0.8 * x - 0.05 * x * x:.3f}".replace(".", ",")
                                     for x in np.linspace(0, 10, 30)]
    at = _app(repo_root).run()
    at.session_state["upload"] = ("dose_de.csv", ("\n".join(rows) + "\n").encode())
    at.run()
    assert not at.exception
    # read with '.', the numbers are not numbers: a message, and a pointer to the option
    assert not [m for m in at.markdown if m.value.startswith("#### Recommended:")]
    assert any("decimal comma" in e.value.lower() for e in at.error)
    assert any("decimal comma" in i.value for i in at.info)
    at.checkbox(key="decimal_comma").check().run()
    _no_failures(at)
    assert _recommended_heading(at)
    assert at.selectbox(key="target").value == "response_V"


def _semicolon_file_with_some_decimal_commas() -> tuple[bytes, int]:
    """40 rows; 4 values of the target are written with a decimal comma (2,5)."""
    lines = ["load_kN;strain_um"]
    commas = 0
    for i in range(40):
        y = 3 * i + 7
        if i % 10 == 3:
            lines.append(f"{i};{y},5")
            commas += 1
        else:
            lines.append(f"{i};{y}")
    return ("\n".join(lines) + "\n").encode(), commas


def _rows_used(at) -> str:
    import re
    found = re.findall(r"([\d,]+) of ([\d,]+) rows used", _texts(at))
    assert found, _texts(at)
    return found[0][0]


def test_decimal_mark_rereads_rows_across_sessions(repo_root):
    # AppTest shares st.cache_data and the sweep store between sessions, as the server does
    raw, commas = _semicolon_file_with_some_decimal_commas()
    # reference: pandas reads the same bytes with each decimal mark
    ref_point = pd.read_csv(io.BytesIO(raw), sep=";")
    ref_comma = pd.read_csv(io.BytesIO(raw), sep=";", decimal=",")
    n_point = int(pd.to_numeric(ref_point["strain_um"], errors="coerce").notna().sum())
    n_comma = int(ref_comma["strain_um"].notna().sum())
    assert (n_point, n_comma) == (40 - commas, 40)

    first = _app(repo_root).run()
    first.session_state["upload"] = ("strain.csv", raw)
    first.run()
    _no_failures(first)
    assert _rows_used(first) == str(n_point)
    warn = " ".join(w.value for w in first.warning)
    assert f"{commas} with 'strain\\_um' not a number" in warn  # the real reason, not "missing"
    first.checkbox(key="decimal_comma").check().run()
    _no_failures(first)
    assert _rows_used(first) == str(n_comma)  # re-read, not the cached point reading

    # a second session with the same bytes, without ticking: the point reading again
    second = _app(repo_root).run()
    second.session_state["upload"] = ("strain.csv", raw)
    second.run()
    _no_failures(second)
    assert _rows_used(second) == str(n_point)
    second.checkbox(key="decimal_comma").check().run()
    assert _rows_used(second) == str(n_comma)
    second.checkbox(key="decimal_comma").uncheck().run()
    assert _rows_used(second) == str(n_point)
    # and the first session still sees its own choice
    first.run()
    assert _rows_used(first) == str(n_comma)


def _metric(at, prefix: str):
    return next(m for m in at.metric if m.label.startswith(prefix))


@pytest.mark.parametrize("unit", ["mse", "rmse"])
def test_every_number_shown_twice_agrees(repo_root, unit):
    """Tiles, the sentence below them and the warnings give one figure one value."""
    at = _app(repo_root).run()
    if unit == "rmse":
        at.radio(key="metric").set_value("rmse").run()
    _no_failures(at)
    card = at.session_state["_card"]
    u = card["unit"]
    assert u == {"mse": "MSE", "rmse": "RMSE"}[unit]
    # one unit on the card: every error tile says it
    for prefix in ("Validation error", "Train–validation gap", "Lowest validation error"):
        assert _metric(at, prefix).label.endswith(f"({u})")
    val = _metric(at, "Validation error").value.split()[0]
    best = _metric(at, "Lowest validation error").value.split()[0]
    assert val == card["validation"] and best == card["best"]
    reason = next(m.value for m in at.markdown if "within one standard" in m.value
                  or "lowest validation error" in m.value)
    assert f"({val})" in reason.replace("\u2060", "")     # the recommended cell's error
    assert best in reason.replace("\u2060", "")           # the best cell's error
    assert "(errors in MSE)" not in reason
    # samples per parameter: the tile and the check count alike
    spp = _metric(at, "Samples per parameter").value
    pending = next(v for k, v in _jobs() if k[0] == "checks")
    table = pending.result().tables["samples_per_parameter"]
    heading = _recommended_heading(at)
    # the demo sweeps ridge and lasso; the heading names the family of a lasso cell
    fam = "lasso" if " lasso penalty" in heading else "ridge"
    row = table[[C.cell_text(int(q), float(a), fam, 1.0 if fam == "lasso" else 0.0) == heading
                 for q, a in zip(table["order"], table["penalty"])]]
    assert f"{float(row['rows_per_parameter'].iloc[0]):.1f}" == spp


def _jobs():
    """The page's background jobs (key, future), most recent last."""
    import sys
    app = sys.modules.get("__main__")
    for mod in list(sys.modules.values()):
        store = getattr(mod, "_background", None)
        if callable(store) and hasattr(store, "clear"):
            _, jobs, _ = store()
            return list(jobs.items())[::-1]
    return []


def test_wide_demo_tile_and_warning_count_samples_per_parameter_alike(repo_root):
    """The wide demo once showed 0.3 on the tile and 7.1 in the warning."""
    at = _app(repo_root)
    at.run()
    at.selectbox(key="source_choice").set_value("demo:wide").run()
    _no_failures(at)
    spp = _metric(at, "Samples per parameter").value
    heading = _recommended_heading(at)
    pending = next(v for k, v in _jobs() if k[0] == "checks")
    report = pending.result()
    table = report.tables["samples_per_parameter"]
    # the demo sweeps ridge and lasso; the heading names the family of a lasso cell
    fam = "lasso" if " lasso penalty" in heading else "ridge"
    row = table[[C.cell_text(int(q), float(a), fam, 1.0 if fam == "lasso" else 0.0) == heading
                 for q, a in zip(table["order"], table["penalty"])]]
    assert f"{float(row['rows_per_parameter'].iloc[0]):.1f}" == spp
    finding = next(f for f in report.findings if f.code == "few_samples_per_parameter")
    worst = table.loc[table["rows_per_parameter"].idxmin()]
    assert f"{float(worst['rows_per_parameter']):.1f} rows per parameter" in finding.message


def test_page_shows_how_sure_with_the_engine_numbers(repo_root, demo_dir):
    from engine.intervals import how_sure

    at = _app(repo_root).run()
    _no_failures(at)
    text = _texts(at)
    assert "How sure, and what would more rows buy?" in text
    assert "More rows or a simpler model?" in text
    table = load_table(demo_dir / "calibration_curve.csv")
    data = prepare(table.frame, "bath_temp_C", ["probe_mV"])
    # the page's default: a penalty range fitted to the data
    spec = SweepSpec("bath_temp_C", ("probe_mV",), max_order=10, scheme=SchemeSpec("loo"))
    sure = how_sure(analyse(data, spec), data)
    shown = {m.label: m.value for m in at.metric}
    assert shown["Error on new rows (MSE, 90% interval)"] == \
        f"{sure.error.low:.4g} – {sure.error.high:.4g}"
    assert shown["90% prediction intervals held"] == f"{sure.prediction.cvplus_coverage:.0%}"
