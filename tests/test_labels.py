"""One vocabulary: names and number formats shared by the page, the pack and the command line."""
from __future__ import annotations

import ast
from pathlib import Path

import pytest

from engine import SchemeSpec, SweepSpec, make_plan
from engine.cli import build_parser
from engine.labels import (CHARTS, COLUMNS, SCHEME_NAMES, penalty_text, samples_per_parameter,
                           scheme_help)
from engine.pack import CHART_FILES
from engine.spec import SCHEME_HELP, SCHEMES


def test_every_scheme_has_one_name_used_by_its_help_and_its_description():
    assert set(SCHEME_NAMES) == set(SCHEMES)
    assert len(set(SCHEME_NAMES.values())) == len(SCHEMES)
    for kind in SCHEMES:
        assert SCHEME_HELP[kind].startswith(SCHEME_NAMES[kind] + ": ")
        assert scheme_help(kind) == SCHEME_HELP[kind]
    for kind in ("kfold", "repeated", "loo", "blocked", "holdout"):
        plan = make_plan(SchemeSpec(kind=kind, folds=3), 30)
        assert plan.description.startswith(SCHEME_NAMES[kind] + ": "), plan.description


def test_command_line_help_names_each_scheme_as_the_page_does():
    parser = build_parser()
    run = next(a for a in parser._subparsers._group_actions[0].choices.values()
               if a.prog.endswith("run"))
    text = " ".join(run.format_help().split())
    for kind, name in SCHEME_NAMES.items():
        assert f"{kind} ({name}:" in text


def test_page_and_command_line_share_their_defaults(repo_root):
    parser = build_parser()
    args = parser.parse_args(["run", "x.csv", "--target", "y", "--out", "o"])
    # the page's Preset is read from app.py's source (importing app.py runs the page)
    tree = ast.parse(Path(repo_root, "app.py").read_text())
    preset = next(n for n in tree.body if isinstance(n, ast.ClassDef) and n.name == "Preset")
    fields = {t.target.id: ast.unparse(t.value) for t in preset.body
              if isinstance(t, ast.AnnAssign) and t.value is not None}
    from engine import spec as S
    for field, arg, const in (("max_order", "max_order", "DEFAULT_MAX_ORDER"),
                              ("folds", "folds", "DEFAULT_FOLDS"),
                              ("repeats", "repeats", "DEFAULT_REPEATS"),
                              ("gap", "gap", "DEFAULT_GAP"),
                              ("holdout_fraction", "holdout_fraction", "DEFAULT_HOLDOUT_FRACTION"),
                              ("seed", "seed", "DEFAULT_SEED")):
        assert fields[field] == const
        assert getattr(args, arg) == getattr(S, const)
    assert SweepSpec("y", ("x",)).max_order == S.DEFAULT_MAX_ORDER


@pytest.mark.parametrize("value,text", [(0, "none"), (3.1623e-4, "3.2e-4"), (0.00316228, "0.00316"),
                                        (1000.0, "1000"), (31.6227, "31.6"), (3162.28, "3160"),
                                        (1e4, "1.0e4"), (1e-8, "1.0e-8")])
def test_penalties_are_written_one_way(value, text):
    assert penalty_text(value) == text


def test_pack_charts_are_the_page_charts_and_columns_have_headers():
    assert CHART_FILES == CHARTS
    assert all(v and v != k for k, v in COLUMNS.items())


def test_samples_per_parameter_counts_rows_over_effective_parameters():
    assert samples_per_parameter(60, 8.5) == pytest.approx(60 / 8.5)
    assert samples_per_parameter(24, 0.4) == 24.0   # never below one parameter
