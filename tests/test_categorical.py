"""Text inputs with few levels as indicator terms, checked against statsmodels' formula OLS.

Reference data: the ISLR Auto table (tests/reference/auto/auto.csv, from
/work/shared/reference/auto-mpg), with ``origin`` (1, 2, 3) read as the text
levels American, European, Japanese. Reference fits: statsmodels
``ols("mpg ~ ... + C(origin)")`` with its default treatment coding (first
level in sorted order as the reference) on the same rows.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from engine import SchemeSpec, SweepSpec, analyse, fit_final
from engine.design import polynomial_terms
from engine.errors import InputProblem
from engine.loading import load_table, prepare

smf = pytest.importorskip("statsmodels.formula.api")

ORIGIN = {1: "American", 2: "European", 3: "Japanese"}


@pytest.fixture(scope="module")
def auto(reference_dir=None):
    from pathlib import Path
    path = Path(__file__).parent / "reference" / "auto" / "auto.csv"
    frame = pd.read_csv(path, na_values="?")
    frame["origin"] = frame["origin"].map(ORIGIN)
    loaded = load_table(frame.to_csv(index=False).encode(), name="auto.csv")
    return frame.dropna(subset=["horsepower"]).reset_index(drop=True), loaded


def _ours(loaded, order, interactions):
    data = prepare(loaded.frame, "mpg", ["horsepower", "origin"])
    model = fit_final(data.X, data.y, data.inputs, order, 0.0, interactions)
    return data, dict(zip(model.terms, model.coefficients))


def _name(sm_term: str) -> str:
    """statsmodels' term name -> Fitladder's."""
    out = sm_term.replace("C(origin)[T.", "origin[").replace("Intercept", "intercept")
    out = out.replace("I(horsepower ** 2)", "horsepower^2").replace("I(horsepower ** 3)",
                                                                     "horsepower^3")
    if ":" in out:
        a, b = out.split(":")
        out = f"{a}*{b}" if a.startswith("horsepower") else f"{b}*{a}"
    return out


@pytest.mark.parametrize("order,interactions,formula", [
    (2, False, "mpg ~ horsepower + I(horsepower**2) + C(origin)"),
    (3, False, "mpg ~ horsepower + I(horsepower**2) + I(horsepower**3) + C(origin)"),
    (2, True, "mpg ~ horsepower + I(horsepower**2) + C(origin) + horsepower:C(origin)"),
])
def test_coefficients_match_statsmodels_formula_ols(auto, order, interactions, formula):
    frame, loaded = auto
    data, ours = _ours(loaded, order, interactions)
    assert data.n_rows == len(frame) == 392
    ref = smf.ols(formula, data=frame).fit()
    expected = {_name(k): float(v) for k, v in ref.params.items()}
    assert set(ours) == set(expected), (sorted(ours), sorted(expected))
    for term, value in expected.items():
        assert ours[term] == pytest.approx(value, rel=1e-9, abs=1e-12), term


def test_reference_level_named_and_indicators_linear_only(auto):
    _, loaded = auto
    data = prepare(loaded.frame, "mpg", ["horsepower", "origin"])
    assert data.inputs == ("horsepower", "origin[European]", "origin[Japanese]")
    f = data.factors["origin"]
    assert f.reference == "American" and f.levels == ("European", "Japanese")
    assert any("reference level 'American'" in n for n in data.notes)
    # no powers of an indicator and no product of two levels of one column
    terms = polynomial_terms(3, 3, True, linear_only=(1, 2), exclusive=((1, 2),))
    assert not np.any(terms[:, 1:] > 1)
    assert not np.any((terms[:, 1] > 0) & (terms[:, 2] > 0))


def test_sweep_runs_with_a_text_input_and_a_record_reads_back(auto):
    _, loaded = auto
    data = prepare(loaded.frame, "mpg", ["horsepower", "origin"])
    spec = SweepSpec("mpg", data.inputs, max_order=3, penalties=(0.0, 1.0),
                     scheme=SchemeSpec("kfold", folds=5))
    res = analyse(data, spec)
    assert np.isfinite(res.validation["validation_mse"]).all()
    # a record lists the indicator names; preparing with them gives the same columns
    again = prepare(loaded.frame, "mpg", list(data.inputs))
    assert again.inputs == data.inputs
    np.testing.assert_array_equal(again.X, data.X)


def test_text_column_with_many_levels_is_refused_with_its_name(auto):
    _, loaded = auto
    with pytest.raises(InputProblem, match="name"):
        prepare(loaded.frame, "mpg", ["horsepower", "name"])


def test_pack_names_the_reference_level(auto, tmp_path):
    from engine.pack import build_pack

    _, loaded = auto
    data = prepare(loaded.frame, "mpg", ["horsepower", "origin"])
    spec = SweepSpec("mpg", data.inputs, max_order=2, penalties=(0.0, 1.0),
                     scheme=SchemeSpec("kfold", folds=5))
    res = build_pack(tmp_path / "p", loaded=loaded, source_name="auto.csv", data=data, spec=spec)
    assert res.summary["data"]["text_inputs"] == {
        "origin": {"reference": "American", "levels": ["European", "Japanese"]}}
    assert "reference level American" in (tmp_path / "p" / "summary.html").read_text()
