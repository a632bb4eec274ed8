"""The pack as a user meets it: leave-one-out splits counted as rows, one error unit in
the headline, a saved model that takes the raw table, and a snippet that runs."""
from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from engine import SchemeSpec, SweepSpec, analyse
from engine.cli import build_parser
from engine.labels import ERROR_UNITS, error_in_unit, se_in_unit
from engine.loading import load_table, prepare
from engine.pack import build_pack, headline_dict, render_html, render_markdown


@pytest.fixture(scope="module")
def loo_case(demo_dir):
    """The calibration demo (24 rows) under leave-one-out, orders 0-3, two penalties."""
    path = demo_dir / "calibration_curve.csv"
    loaded = load_table(path)
    data = prepare(loaded.frame, "bath_temp_C", ["probe_mV"])
    spec = SweepSpec("bath_temp_C", ("probe_mV",), max_order=3, penalties=(0.0, 0.01),
                     scheme=SchemeSpec("loo"))
    return loaded, data, spec, analyse(data, spec)


@pytest.fixture(scope="module")
def loo_packs(loo_case, tmp_path_factory):
    """The same leave-one-out request packed once per error unit."""
    loaded, data, spec, analysis = loo_case
    out = {}
    for unit in ERROR_UNITS:
        folder = tmp_path_factory.mktemp(f"loo_{unit}") / "pack"
        out[unit] = build_pack(folder, loaded=loaded, source_name="calibration_curve.csv",
                               data=data, spec=spec, analysis=analysis, error_unit=unit)
    return out


# ---------------------------------------------------------------------------
# leave-one-out: one split per held-out row
# ---------------------------------------------------------------------------
def test_leave_one_out_per_split_table_has_a_row_per_held_out_row(loo_case):
    from sklearn.linear_model import LinearRegression
    from sklearn.model_selection import LeaveOneOut, cross_val_predict
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import PolynomialFeatures

    _, data, spec, analysis = loo_case
    n = data.n_rows
    assert n == 24
    grid = analysis.validation
    assert (grid["folds"] == n).all()
    per = analysis.sweep.fold_table()
    assert len(per) == len(grid) * n
    for (q, a), part in per.groupby(["order", "penalty"]):
        assert list(part["fold"]) == list(range(1, n + 1))
        assert (part["n_train"] == n - 1).all() and (part["n_validation"] == 1).all()
        row = grid[(grid["order"] == q) & (grid["penalty"] == a)].iloc[0]
        # the grid's error is the mean of the per-row errors
        assert part["validation_mse"].mean() == pytest.approx(row["validation_mse"], rel=1e-12)
        if a == 0.0 and q > 0:
            # reference: scikit-learn refits leaving each row out (LeaveOneOut)
            pred = cross_val_predict(make_pipeline(PolynomialFeatures(int(q)), LinearRegression()),
                                     data.X, data.y, cv=LeaveOneOut())
            np.testing.assert_allclose(part["validation_mse"].to_numpy(), (data.y - pred) ** 2,
                                       rtol=1e-7, atol=1e-9)


def test_leave_one_out_pack_counts_every_row_as_a_split(loo_packs, loo_case):
    _, data, _, analysis = loo_case
    res = loo_packs["mse"]
    n = data.n_rows
    per = pd.read_csv(res.out_dir / "validation_per_split.csv")
    assert len(per) == len(analysis.validation) * n
    assert per["fold"].max() == n
    grid = pd.read_csv(res.out_dir / "validation_grid.csv")
    assert (grid["folds"] == n).all()
    s = res.summary
    assert s["validation"]["splits"] == n
    assert all(g["folds"] == n for g in s["grid"])
    assert f"each of {n} rows held out once" in s["validation"]["description"]


def test_k_fold_per_split_table_keeps_one_row_per_fold(demo_dir):
    loaded = load_table(demo_dir / "calibration_curve.csv")
    data = prepare(loaded.frame, "bath_temp_C", ["probe_mV"])
    spec = SweepSpec("bath_temp_C", ("probe_mV",), max_order=2, penalties=(0.0,),
                     scheme=SchemeSpec("kfold", folds=4))
    a = analyse(data, spec)
    per = a.sweep.fold_table()
    assert len(per) == len(a.validation) * 4 and (a.validation["folds"] == 4).all()
    assert per["n_validation"].sum() == data.n_rows * len(a.validation)


# ---------------------------------------------------------------------------
# one error unit in the headline
# ---------------------------------------------------------------------------
def _headline_md(md: str) -> str:
    return md.split("## Data")[0]


def _forbidden_numbers(s: dict, unit: str) -> set[str]:
    """The headline's error figures written in the other unit (as the pack writes them)."""
    other = "mse" if unit == "rmse" else "rmse"
    out = set()
    for c in (s["recommended"], s["best"]):
        out.add(f"{error_in_unit(c['validation_mse'], other):.4g}")
        if c.get("validation_mse_se") is not None:
            out.add(f"{se_in_unit(c['validation_mse'], c['validation_mse_se'], other):.2g}")
    if unit == "rmse" and s["recommended"].get("paired_difference"):
        out.add(f"{s['recommended']['paired_difference']:.3g}")   # a difference in MSE
    return out


@pytest.mark.parametrize("unit", list(ERROR_UNITS))
def test_every_error_in_the_headline_is_in_the_chosen_unit(loo_packs, unit):
    res = loo_packs[unit]
    s = res.summary
    assert s["headline"]["unit"] == unit
    r, b = s["recommended"], s["best"]
    assert s["headline"]["validation_error"] == pytest.approx(
        error_in_unit(r["validation_mse"], unit), rel=1e-12)
    assert s["headline"]["best_error"] == pytest.approx(
        error_in_unit(b["validation_mse"], unit), rel=1e-12)
    md = (res.out_dir / "summary.md").read_text(encoding="utf-8")
    head = _headline_md(md)
    # the figures in the chosen unit are there ...
    assert f"{error_in_unit(r['validation_mse'], unit):.4g}" in head
    assert f"{error_in_unit(b['validation_mse'], unit):.4g}" in head
    # ... and no error is named or written in the other unit
    name = ERROR_UNITS[unit]
    words = re.findall(r"\bR?MSE\b", head)
    assert words and set(words) == {name}, words
    numbers = set(re.findall(r"\d+(?:\.\d+)?(?:e[-+]?\d+)?", head))
    clash = _forbidden_numbers(s, unit) & numbers
    assert not clash, (clash, head)
    # summary.html's verdict box says the same
    html = (res.out_dir / "summary.html").read_text(encoding="utf-8")
    verdict = html.split('<div class="verdict">')[1].split("</div>\n </div>")[0]
    assert f"Validation {name} <b>{error_in_unit(r['validation_mse'], unit):.4g}</b>" in verdict
    assert set(re.findall(r"\bR?MSE\b", verdict)) == {name}
    assert not (_forbidden_numbers(s, unit) & set(re.findall(r"\d+(?:\.\d+)?", verdict)))


@pytest.mark.parametrize("unit", list(ERROR_UNITS))
def test_candidates_tables_use_the_headline_unit(loo_packs, unit):
    res = loo_packs[unit]
    s = res.summary
    name = ERROR_UNITS[unit]
    md = (res.out_dir / "summary.md").read_text(encoding="utf-8")
    table = md.split("## Leading candidates")[1].split("##")[0]
    assert f"validation {name} |" in table
    for c in s["candidates"]:
        want = f"{error_in_unit(c['validation_mse'], unit):.4g}"
        assert f"| {want} |" in table, (want, table)
    html = (res.out_dir / "summary.html").read_text(encoding="utf-8")
    box = html.split("Leading candidates")[1].split("</table>")[0]
    assert f"<th>val. {name}</th>" in box
    r = s["recommended"]
    assert f"<td>{error_in_unit(r['validation_mse'], unit):.4g}</td>" in box
    if unit == "rmse" and r["validation_mse"] != 1.0:   # the MSE itself is not shown
        assert f"<td>{r['validation_mse']:.4g}</td>" not in box


def test_headline_renders_the_same_from_the_summary_for_both_units(loo_packs):
    s = dict(loo_packs["mse"].summary)
    for unit in ERROR_UNITS:
        s["headline"] = headline_dict(s, unit)
        md = render_markdown(s)
        assert s["headline"]["figures"] in md
        assert s["headline"]["reason"] in md.replace("\\", "")
        assert f"Validation {ERROR_UNITS[unit]}" in render_html(s, {})


def test_command_line_errors_option_reaches_the_pack(monkeypatch, demo_dir, tmp_path, capsys):
    import engine.pack
    from engine.cli import main

    args = build_parser().parse_args(["run", "x.csv", "--target", "y", "--out", "o"])
    assert args.errors == "mse"      # the page's default ("Errors shown as")
    seen = []
    real = engine.pack.build_pack

    def spy(*a, **kw):
        seen.append(kw.get("error_unit"))
        return real(*a, **kw)

    monkeypatch.setattr(engine.pack, "build_pack", spy)
    out = tmp_path / "pack"
    code = main(["run", str(demo_dir / "calibration_curve.csv"), "--target", "bath_temp_C",
                 "--max-order", "2", "--penalties", "none", "--errors", "rmse",
                 "--out", str(out)])
    assert code == 0 and seen == ["rmse"]
    printed = capsys.readouterr().out
    import json
    s = json.loads((out / "summary.json").read_text())
    assert f"validation RMSE {s['headline']['validation_error']:.4g}" in printed
    assert json.loads((out / "record.json").read_text())["error_unit"] == "rmse"


# ---------------------------------------------------------------------------
# a saved model with a text input takes the raw text column
# ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def text_pack(tmp_path_factory):
    """A table with a text column (three sites) used as an input; pack of order <= 2."""
    rng = np.random.default_rng(5)
    n = 90
    site = np.array(["north", "south", "east"])[rng.integers(0, 3, n)]
    temp = rng.uniform(10, 30, n)
    y = 3 + 0.5 * temp + 0.01 * temp ** 2 + np.select([site == "north", site == "south"],
                                                      [1.0, -2.0], 0.0) + rng.normal(0, 0.3, n)
    frame = pd.DataFrame({"temp_C": temp, "site": site, "yield_pct": y})
    folder = tmp_path_factory.mktemp("text_src")
    path = folder / "kiln_sites.csv"
    frame.to_csv(path, index=False)
    loaded = load_table(path)
    data = prepare(loaded.frame, "yield_pct", ["temp_C", "site"])
    spec = SweepSpec("yield_pct", tuple(data.inputs), max_order=2, penalties=(0.0, 0.1),
                     scheme=SchemeSpec("kfold", folds=5))
    res = build_pack(folder / "pack", loaded=loaded, source_name=path.name, data=data, spec=spec)
    return res, data, frame


def _run_snippet(lines: list[str], folder, scope: dict) -> tuple:
    """Run the pack's own lines in the pack folder with warnings as errors: the first
    two (imports, loading) as statements, the last (a prediction) as an expression;
    then ``scope['_after']`` (a callable of the scope), still in the folder."""
    import os
    import warnings

    here = os.getcwd()
    try:
        os.chdir(folder)
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            exec("\n".join(lines[:-1]), scope)
            example = eval(lines[-1], scope)
            after = scope["_after"](scope) if "_after" in scope else None
    finally:
        os.chdir(here)
    return example, after


def test_saved_model_with_a_text_input_predicts_from_the_raw_table(text_pack):
    res, data, frame = text_pack
    assert res.model.text_inputs == {"site": ("east", ("north", "south"))}
    assert "site[north]" in res.model.input_names
    use = res.summary["use"]["python"]
    # the snippet's own lines load the file; then predict from the table as the user has it
    example, got = _run_snippet(use, res.out_dir, {
        "_after": lambda sc: sc["model"].predict(frame[["site", "temp_C"]])})
    np.testing.assert_allclose(got, res.model.predict(data.X), rtol=1e-10,
                               atol=1e-10 * np.ptp(data.y))
    assert np.shape(example) == (1,) and np.isfinite(example).all()
    assert "'site': ['east']" in use[2]      # the snippet writes the text as text
    # the checked loader accepts the same file; a level never seen is refused
    from engine.pack import load_pipeline
    pipe = load_pipeline(res.out_dir / "model.skops")
    with pytest.raises(ValueError, match="unknown categor"):
        pipe.predict(pd.DataFrame({"temp_C": [20.0], "site": ["west"]}))
    assert "north" in res.summary["use"]["text_note"]


# ---------------------------------------------------------------------------
# the "Use this model" snippet: an explicit allow-list, and it runs
# ---------------------------------------------------------------------------
def _schema_types(path) -> set[str]:
    """scikit-learn types named in a .skops file's schema.json (the skops file format:
    a zip archive whose schema.json gives each object's __module__ and __class__)."""
    import json
    import zipfile

    found: set[str] = set()

    def walk(o):
        if isinstance(o, dict):
            if "__class__" in o and str(o.get("__module__", "")).startswith("sklearn"):
                found.add(f"{o['__module__']}.{o['__class__']}")
            for v in o.values():
                walk(v)
        elif isinstance(o, list):
            for v in o:
                walk(v)

    with zipfile.ZipFile(path) as z:
        walk(json.loads(z.read("schema.json")))
    return found


def _models_of_every_shape(text_pack):
    from engine import ArrayData, fit_cell

    rng = np.random.default_rng(3)
    X = rng.uniform(0.0, 5.0, size=(60, 6))
    y = 1 + X[:, 0] ** 2 - X[:, 1] + X[:, 2] * X[:, 3] + rng.normal(0, 0.1, 60)
    names = tuple(f"ch_{j}" for j in range(6))
    data = ArrayData(X, y, inputs=names)
    out = {"text input": text_pack[0].model}
    for label, inputs, inter, order in (("one input", names[:1], False, 3),
                                        ("three inputs", names[:3], False, 2),
                                        ("products", names[:2], True, 2),
                                        ("six inputs", names, False, 1),
                                        ("intercept only", names[:2], False, 0)):
        d = ArrayData(X[:, :len(inputs)], y, inputs=inputs)
        out[label] = fit_cell(d, SweepSpec("y", inputs, interactions=inter), order, 0.0)
    del data
    return out


def test_snippet_trusts_an_explicit_list_of_the_pipeline_types_and_runs(text_pack, tmp_path):
    import skops.io as sio

    from engine.pack import EXPECTED_MODEL_TYPES, pipeline_types, save_pipeline, usage

    for label, model in _models_of_every_shape(text_pack).items():
        folder = tmp_path / label.replace(" ", "_")
        folder.mkdir()
        save_pipeline(model, folder / "model.skops")
        use = usage(model)
        lines = use["python"]
        assert len(lines) == 3 and "get_untrusted_types" not in "\n".join(lines)
        listed = pipeline_types(model)
        assert f"trusted={listed!r}" in lines[1]
        assert set(listed) <= EXPECTED_MODEL_TYPES
        # the list is exactly the scikit-learn types the file holds (skops's own schema)
        assert set(listed) == _schema_types(folder / "model.skops"), label
        example, _ = _run_snippet(lines, folder, {})
        assert np.shape(example) == (1,) and np.isfinite(example).all(), label
        if "..." not in lines[2]:
            # the example row is the middle of every range (text at its reference level)
            mid = (np.asarray(model.x_min) + np.asarray(model.x_max)) / 2
            if model.text_inputs:
                mid[[i for i, n in enumerate(model.input_names) if "[" in n]] = 0.0
            assert example[0] == pytest.approx(float(model.predict(mid[None, :])[0]),
                                               rel=1e-6, abs=1e-9)
    # a file holding a type outside the list is refused by the snippet's own load line
    import operator

    from sklearn.pipeline import Pipeline
    from sklearn.preprocessing import FunctionTransformer
    bad = tmp_path / "foreign"
    bad.mkdir()
    sio.dump(Pipeline([("f", FunctionTransformer(operator.neg))]), str(bad / "model.skops"))
    with pytest.raises(sio.exceptions.UntrustedTypesFoundException):
        _run_snippet(usage(text_pack[0].model)["python"], bad, {})


def _text_models(text_pack):
    """Models with a text input before a number input, alone, and in products."""
    from engine import fit_cell

    _, _, frame = text_pack
    out = {}
    for label, inputs, inter, order in (("text first", ["site", "temp_C"], False, 2),
                                        ("text alone", ["site"], False, 1),
                                        ("text in products", ["temp_C", "site"], True, 2),
                                        ("text, intercept only", ["site", "temp_C"], False, 0)):
        data = prepare(frame, "yield_pct", inputs)
        spec = SweepSpec("yield_pct", tuple(data.inputs), interactions=inter)
        out[label] = fit_cell(data, spec, order, 0.0)
    return out


def test_pipeline_types_name_the_types_of_the_built_pipeline(text_pack):
    # reference: the types of the scikit-learn pipeline itself (sklearn_pipeline), each
    # step then its ColumnTransformer parts, each name once
    from engine.pack import pipeline_types, sklearn_pipeline

    def name(obj):
        return f"{type(obj).__module__}.{type(obj).__qualname__}"

    models = {**_models_of_every_shape(text_pack), **_text_models(text_pack)}
    assert models["text first"].input_names[0].startswith("site[")
    assert models["text alone"].input_names == ("site[north]", "site[south]")
    for label, model in models.items():
        pipe = sklearn_pipeline(model)
        built = [name(pipe)]
        for _, step in pipe.steps:
            for obj in [step] + [t for _, t, _ in getattr(step, "transformers", []) or []]:
                if not isinstance(obj, str) and name(obj) not in built:
                    built.append(name(obj))
        assert pipeline_types(model) == built, label


def test_recorded_scikit_learn_version_is_the_imported_one():
    # reference: scikit-learn's own __version__
    import sklearn

    from engine.pack import _versions

    assert _versions()["scikit-learn"] == sklearn.__version__


# ---------------------------------------------------------------------------
# the model file written by the command line's child process
# ---------------------------------------------------------------------------
def _skops_members(path) -> tuple[str, dict[str, bytes]]:
    """A .skops file's schema.json with object identities numbered in order of appearance,
    and its array members keyed the same way (the skops file format: a zip archive of
    schema.json plus one .npy member per array, named after the array's ``id()``)."""
    import zipfile

    with zipfile.ZipFile(path) as z:
        schema = z.read("schema.json").decode()
        arrays = {n: z.read(n) for n in z.namelist() if n != "schema.json"}
    seen: dict[str, str] = {}
    number = re.compile(r"\d{6,}")
    schema = number.sub(lambda m: seen.setdefault(m.group(0), f"<{len(seen)}>"), schema)
    return schema, {number.sub(lambda m: seen[m.group(0)], n): b for n, b in arrays.items()}


_CHILD_WRITES = r"""
import pickle, sys
from pathlib import Path
from engine import pack
models = pickle.loads(sys.stdin.buffer.read())
pack._skops_for_saving()    # what the model file's child process does before saving
assert not hasattr(sys.modules["skops.io._trusted_types"], "__file__")
for label, model in models.items():
    pack.save_pipeline(model, Path(sys.argv[1]) / f"{label}.skops")
"""


def test_model_file_child_writes_the_file_skops_writes(text_pack, tmp_path):
    """Without skops's lists of trusted types (`engine.pack._skops_for_saving`) the child
    writes the same file as ``skops.io.dump`` imported the ordinary way, and it loads."""
    import os
    import pickle
    import subprocess
    import sys
    from pathlib import Path

    from engine.pack import load_pipeline, save_pipeline

    models = {label.replace(" ", "_"): m for label, m in _models_of_every_shape(text_pack).items()}
    child, here = tmp_path / "child", tmp_path / "here"
    child.mkdir()
    here.mkdir()
    repo = Path(__file__).resolve().parents[1]
    proc = subprocess.run([sys.executable, "-c", _CHILD_WRITES, str(child)],
                          input=pickle.dumps(models), capture_output=True, cwd=repo,
                          env=dict(os.environ, PYTHONPATH=str(repo)), timeout=300)
    assert proc.returncode == 0, proc.stderr.decode()
    rng = np.random.default_rng(11)
    for label, model in models.items():
        save_pipeline(model, here / f"{label}.skops")
        assert _skops_members(child / f"{label}.skops") == _skops_members(here / f"{label}.skops"), label
        pipe = load_pipeline(child / f"{label}.skops")
        if model.text_inputs:
            continue      # the text-input pipeline is checked on its raw table above
        Xq = rng.uniform(0.0, 5.0, size=(7, len(model.input_names)))
        got = pipe.predict(pd.DataFrame(Xq, columns=list(model.input_names)))
        np.testing.assert_allclose(got, model.predict(Xq), rtol=1e-10, atol=1e-10)


def test_no_thread_of_the_pack_runs_when_the_model_file_child_is_forked(monkeypatch, tmp_path,
                                                                        demo_dir):
    """The model file's child is forked only while no other thread runs (a fork beside
    threads is unsafe, and the writer then falls back to writing in this process):
    the checks' thread (`engine.checks.checks_ahead`), the intervals' and the learning
    curve's threads are started after the writer."""
    from engine import fingerprint as F
    from engine import pack as P

    events = []
    real_writer, real_thread = P._ModelFileWriter.__init__, F.in_background

    def writer(self, model, path, background):
        events.append("model file writer")
        real_writer(self, model, path, False)   # written here: the test process may hold threads

    def thread(fn, *args, **kw):
        events.append(f"thread {kw.get('name')}")
        return real_thread(fn, *args, **kw)

    monkeypatch.setattr(P._ModelFileWriter, "__init__", writer)
    monkeypatch.setattr(F, "in_background", thread)
    lt = load_table(demo_dir / "calibration_curve.csv")
    data = prepare(lt.frame, "bath_temp_C", ["probe_mV"])
    spec = SweepSpec("bath_temp_C", ("probe_mV",), max_order=3, scheme=SchemeSpec("kfold"))
    build_pack(tmp_path / "pack", data=data, spec=spec, loaded=lt, source_name="c.csv",
               model_file_in_background=True)
    assert events == ["model file writer", "thread fitladder-checks",
                      "thread fitladder-intervals", "thread fitladder-learning"]
    assert (tmp_path / "pack" / "model.skops").is_file()
