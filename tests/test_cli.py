"""The fitladder command line: a pack from the demo data, exact re-runs, clear exits."""
from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

import engine.pack
from engine import default_penalties
from engine.cli import build_parser, main, parse_penalty_range
from engine.pack import PACK_FILES
from engine.spec import DEFAULT_MAX_ORDER

PY = sys.executable
SCRIPT = Path(sys.executable).parent / "fitladder"
FAST = ["--max-order", "6", "--penalties", "0,0.001,0.1"]


def _run(args, **kw):
    env = dict(os.environ, **kw.pop("env", {}))
    return subprocess.run(args, capture_output=True, text=True, env=env, timeout=300, **kw)


def _call(argv, capsys) -> tuple[int, str, str]:
    """Run ``main`` in this process; argparse's own exits count as return codes."""
    try:
        code = main(argv)
    except SystemExit as exc:
        code = exc.code
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture(scope="module")
def cli_pack(tmp_path_factory, demo_dir):
    """One real run of the console script on the calibration demo."""
    out = tmp_path_factory.mktemp("cli") / "pack"
    data = demo_dir / "calibration_curve.csv"
    proc = _run([str(SCRIPT), "run", str(data), "--target", "bath_temp_C", *FAST,
                 "--out", str(out)])
    return proc, out, data


# ---------------------------------------------------------------------------
# help
# ---------------------------------------------------------------------------
def test_help_documents_every_option(capsys):
    parser = build_parser()
    code, out, _ = _call(["--help"], capsys)
    assert code == 0 and "run" in out and "rerun" in out
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    for name, sp in sub.choices.items():
        code, out, _ = _call([name, "--help"], capsys)
        assert code == 0
        flat = " ".join(out.split())
        for action in sp._actions:
            assert action.help, (name, action.dest)
            for opt in action.option_strings or [action.metavar]:
                assert opt in out, (name, opt)
            assert " ".join(action.help.split()[:4]) in flat, (name, action.dest)


def test_console_script_and_module_entry_point():
    assert _run([str(SCRIPT), "--help"]).returncode == 0
    proc = _run([PY, "-m", "engine", "run", "--help"])
    assert proc.returncode == 0 and "--penalty-range" in proc.stdout


# ---------------------------------------------------------------------------
# a real run and its re-run
# ---------------------------------------------------------------------------
def test_run_writes_the_whole_pack(cli_pack):
    proc, out, _ = cli_pack
    assert proc.returncode == 0, proc.stderr
    assert "Recommended: order" in proc.stdout and str(out) in proc.stdout
    assert "[100%] Pack written" in proc.stderr  # progress goes to stderr
    assert "Warning" not in proc.stderr  # no numpy RuntimeWarning (or other) on a clean run
    assert sorted(p.name for p in out.iterdir()) == sorted(PACK_FILES)
    s = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert s["sweep"]["penalties"] == [0.0, 0.001, 0.1]
    assert s["sweep"]["orders"] == list(range(7))
    assert s["roles"]["inputs"] == ["probe_mV"]  # default: every numeric column but the target


def test_rerun_reproduces_summary_json_exactly(cli_pack, tmp_path):
    proc, out, data = cli_pack
    assert proc.returncode == 0, proc.stderr
    again = tmp_path / "again"
    # the data lies outside the pack folder, so it is named with --data
    proc2 = _run([PY, "-m", "engine", "rerun", str(out / "record.json"), "--data", str(data),
                  "--out", str(again)])
    assert proc2.returncode == 0, proc2.stderr
    assert (again / "summary.json").read_bytes() == (out / "summary.json").read_bytes()
    for name in ("validation_grid.csv", "model_coefficients.csv", "learning_curve.csv"):
        assert (again / name).read_bytes() == (out / name).read_bytes(), name


def test_rerun_of_the_default_penalty_range_finds_the_same_grid(tmp_path, demo_dir, capsys):
    """With no --penalties the record asks for a range fitted to the data (an empty list);
    a re-run fits it again from the same rows and reproduces the pack."""
    data = demo_dir / "calibration_curve.csv"
    out = tmp_path / "pack"
    code, _, err = _call(["run", str(data), "--target", "bath_temp_C", "--out", str(out)],
                         capsys)
    assert code == 0, err
    rec = json.loads((out / "record.json").read_text())
    assert rec["spec"]["penalties"] == []
    code, _, err = _call(["rerun", str(out / "record.json"), "--data", str(data), "--out",
                          str(tmp_path / "again")], capsys)
    assert code == 0, err
    assert (tmp_path / "again" / "summary.json").read_bytes() == \
        (out / "summary.json").read_bytes()
    assert (tmp_path / "again" / "validation_grid.csv").read_bytes() == \
        (out / "validation_grid.csv").read_bytes()


def test_rerun_with_changed_data_is_refused(cli_pack, tmp_path, capsys):
    proc, out, data = cli_pack
    assert proc.returncode == 0, proc.stderr
    changed = tmp_path / "calibration_curve.csv"
    changed.write_bytes(data.read_bytes().replace(b"56.11", b"56.12"))
    code, _, err = _call(["rerun", str(out / "record.json"), "--data", str(changed),
                          "--out", str(tmp_path / "x")], capsys)
    assert code == 2
    assert "SHA-256" in err and "Traceback" not in err
    assert not (tmp_path / "x").exists()


def test_unpenalised_run_matches_numpy_polyfit(tmp_path, demo_dir, capsys):
    data = demo_dir / "calibration_curve.csv"
    out = tmp_path / "plain"
    code, _, err = _call(["run", str(data), "--target", "bath_temp_C", "--inputs", "probe_mV",
                          "--penalties", "none", "--max-order", "4", "--scheme", "loo",
                          "--out", str(out)], capsys)
    assert code == 0, err
    s = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert s["sweep"]["penalties"] == [0.0] and s["recommended"]["penalty"] == 0.0
    q = s["recommended"]["order"]
    table = np.genfromtxt(data, delimiter=",", names=True)
    # reference: numpy's least-squares polynomial fit, highest power first
    ref = np.polyfit(table["probe_mV"], table["bath_temp_C"], q)[::-1]
    rows = (out / "model_coefficients.csv").read_text(encoding="utf-8").splitlines()[1:]
    got = np.array([float(r.split(",")[-1]) for r in rows])
    np.testing.assert_allclose(got, ref, rtol=1e-8, atol=1e-10 * np.abs(ref).max())


# ---------------------------------------------------------------------------
# bad input -> 2, internal error -> 1
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("argv,words", [
    (["run", "no_such_file.csv", "--target", "y"], "no file"),
    (["run", "{demo}", "--target", "bath_temp"], "no column named 'bath_temp'"),
    (["run", "{demo}", "--target", "bath_temp_C", "--inputs", "probe_V"], "probe_V"),
    (["run", "{demo}", "--target", "bath_temp_C", "--penalty-range", "1e-3:1e2"], "LO:HI:COUNT"),
    (["run", "{demo}", "--target", "bath_temp_C", "--penalty-range", "0:1e2:5"], "positive"),
    (["run", "{demo}", "--target", "bath_temp_C", "--penalty-range", "1e2:1e-3:5"], "HI"),
    (["run", "{demo}", "--target", "bath_temp_C", "--penalty-range", "a:b:c"], "LO:HI:COUNT"),
    (["run", "{demo}", "--target", "bath_temp_C", "--penalties", "none",
      "--penalty-range", "1:10:3"], "--penalties ridge"),
    (["run", "{demo}", "--target", "bath_temp_C", "--penalties", "0,-1"], "0 or more"),
    (["run", "{demo}", "--target", "bath_temp_C", "--scheme", "grouped"], "--group-column"),
    (["run", "{demo}", "--target", "bath_temp_C", "--max-order", "2", "--orders", "1"],
     "not allowed with"),
    (["run", "{demo}", "--target", "bath_temp_C", "--scheme", "weekly"], "invalid choice"),
    (["rerun", "no_such_pack/record.json"], "no record file"),
    (["rerun", "{demo}"], "not a readable record"),
])
def test_bad_input_exits_2_with_one_message(argv, words, demo_dir, tmp_path, capsys):
    demo = str(demo_dir / "calibration_curve.csv")
    argv = [demo if a == "{demo}" else a for a in argv] + ["--out", str(tmp_path / "out")]
    code, _, err = _call(argv, capsys)
    assert code == 2
    assert words in err
    assert "Traceback" not in err


def test_internal_error_exits_1_without_traceback(monkeypatch, demo_dir, tmp_path, capsys):
    def broken(*args, **kwargs):
        raise RuntimeError("chart renderer missing")

    monkeypatch.setattr(engine.pack, "build_pack", broken)
    argv = ["run", str(demo_dir / "calibration_curve.csv"), "--target", "bath_temp_C",
            "--out", str(tmp_path / "o")]
    monkeypatch.delenv("FITLADDER_DEBUG", raising=False)
    code, _, err = _call(argv, capsys)
    assert code == 1 and "internal error" in err and "chart renderer missing" in err
    assert "Traceback" not in err
    monkeypatch.setenv("FITLADDER_DEBUG", "1")
    code, _, err = _call(argv, capsys)
    assert code == 1 and "Traceback" in err


# ---------------------------------------------------------------------------
# how options become a request (the sweep itself is replaced by a recorder)
# ---------------------------------------------------------------------------
@pytest.fixture
def recorded(monkeypatch):
    calls = []

    def record(out_dir, **kw):
        calls.append(kw)
        r = {"order": 1, "penalty": 0.0, "validation_rmse": 1.0}
        return SimpleNamespace(out_dir=Path(out_dir), files=[], summary={
            "recommended": r, "roles": {"target": kw["spec"].target}, "warnings": []})

    monkeypatch.setattr(engine.pack, "build_pack", record)
    return calls


def test_options_become_the_request(recorded, demo_dir, tmp_path, capsys):
    argv = ["run", str(demo_dir / "drifting_line_sensors.csv"), "--target", "yield_pct",
            "--order-column", "minute", "--scheme", "blocked", "--folds", "4", "--gap", "30",
            "--orders", "1,3", "--interactions", "--penalty-range", "1e-2:1e2:5",
            "--seed", "11", "--compare", "1", "--out", str(tmp_path / "o")]
    code, out, err = _call(argv, capsys)
    assert code == 0, err
    kw = recorded[0]
    spec = kw["spec"]
    assert spec.inputs == ("inlet_temp_C", "jacket_temp_C", "feed_pressure_kPa",
                           "feed_flow_L_min", "stirrer_speed_rpm", "coolant_flow_L_min")
    assert spec.orders == (1, 3) and spec.interactions and spec.seed == 11
    assert spec.penalties == default_penalties(1e-2, 1e2, 5, include_zero=True)
    assert (spec.scheme.kind, spec.scheme.folds, spec.scheme.gap,
            spec.scheme.order_column) == ("blocked", 4, 30, "minute")
    assert kw["compare_orders"] == (1,)
    assert kw["source_name"] == "drifting_line_sensors.csv"


def test_default_penalties_follow_the_data(recorded, demo_dir, tmp_path, capsys):
    code, _, err = _call(["run", str(demo_dir / "calibration_curve.csv"), "--target",
                          "bath_temp_C", "--out", str(tmp_path / "o")], capsys)
    assert code == 0, err
    spec = recorded[0]["spec"]
    # no --penalty-range: the range is fitted to the data (and widened at an edge)
    assert spec.penalties == () and spec.penalty_range == "data"
    assert spec.rule == "paired"
    assert spec.max_order == DEFAULT_MAX_ORDER and spec.scheme.kind == "kfold" and spec.scheme.folds == 5
    assert parse_penalty_range("1e-4:1e3:15") == (1e-4, 1e3, 15)


def test_decimal_comma_files(recorded, tmp_path, capsys):
    path = tmp_path / "comma.csv"
    path.write_text("x;y\n1,5;2,25\n2,5;6,25\n3,5;12,25\n4,5;20,25\n", encoding="utf-8")
    code, _, err = _call(["run", str(path), "--target", "y", "--decimal-comma",
                          "--out", str(tmp_path / "o")], capsys)
    assert code == 0, err
    data = recorded[0]["data"]
    np.testing.assert_array_equal(data.X[:, 0], [1.5, 2.5, 3.5, 4.5])
    assert recorded[0]["load_options"]["decimal"] == ","
    code, _, err = _call(["run", str(path), "--target", "y", "--out", str(tmp_path / "p")],
                         capsys)
    assert code == 2 and "--decimal-comma" in err and "Traceback" not in err


def test_dropped_rows_are_reported_on_the_command_line(recorded, tmp_path, capsys):
    rows = ["x,y"] + [f"{i},{i * i}" for i in range(20)]
    rows[3] = '2,"1,204.50"'
    rows[9] = "8,"
    path = tmp_path / "d.csv"
    path.write_text("\n".join(rows) + "\n")
    code, _, err = _call(["run", str(path), "--target", "y", "--out", str(tmp_path / "o")],
                         capsys)
    assert code == 0, err
    assert ("2 of 20 rows dropped: 1 with 'y' empty; 1 with 'y' not a number "
            "(first: '1,204.50')") in err


def test_a_hundred_thousand_repeats_are_refused_before_the_sweep(demo_dir, tmp_path, capsys,
                                                                  monkeypatch):
    import engine.analysis
    from engine.budget import Limits

    def never(*a, **k):
        raise AssertionError("the sweep started")
    monkeypatch.setattr(engine.analysis, "analyse", never)
    monkeypatch.setattr(engine.pack, "build_pack", never)
    monkeypatch.delenv("FITLADDER_MAX_SECONDS", raising=False)
    out = tmp_path / "pack"
    code, _, err = _call(["run", str(demo_dir / "calibration_curve.csv"), "--target",
                          "bath_temp_C", "--scheme", "repeated", "--repeats", "100000",
                          "--out", str(out)], capsys)
    assert code == 2, err
    message = err.strip().splitlines()[-1]
    assert "longer than allowed" in message
    assert "500,000 splits = 5 folds x 100,000 repeats" in message   # the figures
    assert f"the limit is {Limits().max_seconds / 60:.0f} min" in message
    # the next step: a repeat count that fits, or a higher limit
    suggested = int(message.split("--repeats ")[1].split()[0])
    assert 1 <= suggested < 100000
    assert "--time-limit" in message and "FITLADDER_MAX_SECONDS" in message
    assert not out.exists()
    # the suggested count is indeed within the limit by the same estimate
    from engine import SchemeSpec, SweepSpec
    from engine.budget import check_request
    spec = SweepSpec("bath_temp_C", ("probe_mV",), scheme=SchemeSpec("repeated",
                                                                     repeats=suggested))
    assert check_request(spec, 24).seconds <= Limits().max_seconds
    # a higher limit through the environment lets the same request past the budget
    monkeypatch.setenv("FITLADDER_MAX_SECONDS", str(10 ** 7))
    code, _, err = _call(["run", str(demo_dir / "calibration_curve.csv"), "--target",
                          "bath_temp_C", "--scheme", "repeated", "--repeats", "100000",
                          "--out", str(out)], capsys)
    assert code == 1 and "the sweep started" in err   # (the stand-in sweep above)
    assert "request:" in err and " h on this machine" in err   # the estimate, before the run


def test_the_command_line_module_imports_nothing_heavy():
    """``python -m engine`` forks its chart-drawing child before pandas, scipy, scikit-learn
    or Altair are imported: neither ``import engine`` nor the command line's module imports
    them, and every public name of the package still resolves (to its module's object)."""
    script = ("import json, sys, engine, engine.cli\n"
              "heavy = sorted(m for m in ('pandas', 'scipy', 'sklearn', 'altair') "
              "if m in sys.modules)\n"
              "from engine import analyse, InputProblem\n"
              "import engine.analysis, engine.errors\n"
              "unresolved = [n for n in engine.__all__ if getattr(engine, n, None) is None]\n"
              "same = analyse is engine.analysis.analyse and InputProblem is engine.errors.InputProblem\n"
              "print(json.dumps([heavy, unresolved, same, set(engine.__all__) <= set(dir(engine))]))\n")
    repo = Path(__file__).resolve().parents[1]
    proc = _run([PY, "-c", script], cwd=repo, env={"PYTHONPATH": str(repo)})
    assert proc.returncode == 0, proc.stderr
    assert json.loads(proc.stdout) == [[], [], True, True]


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc's mallopt")
def test_the_command_line_keeps_freed_memory_unless_malloc_is_set():
    """The command line asks glibc to keep freed blocks of up to 32 MB for the next array
    (``cli._kept_memory``); a ``MALLOC_*`` setting in the environment wins over it. After it,
    a 16 MB array freed and made again is served from memory already touched, so making it
    the second time costs almost no page faults; with glibc's defaults it costs one per page
    (both on ordinary 4 KB pages, as the command line uses them)."""
    script = ("import resource, sys, numpy as np, engine.cli as c\n"
              "c._small_pages()\n"
              "ok = c._kept_memory()\n"
              "def faults():\n"
              "    return resource.getrusage(resource.RUSAGE_SELF).ru_minflt\n"
              "a = np.ones(2 << 20); del a\n"
              "f0 = faults(); b = np.ones(2 << 20); f1 = faults()\n"
              "print(ok, f1 - f0)\n")
    repo = Path(__file__).resolve().parents[1]
    env = {k: v for k, v in os.environ.items() if not k.startswith("MALLOC_")}
    env["PYTHONPATH"] = str(repo)
    kept = subprocess.run([PY, "-c", script], cwd=repo, env=env, capture_output=True, text=True,
                          timeout=120)
    assert kept.returncode == 0, kept.stderr
    ok, again = kept.stdout.split()
    assert ok == "True"
    assert int(again) < 500          # 16 MB is 4,096 pages of 4 KB
    env["MALLOC_ARENA_MAX"] = "4"
    told = subprocess.run([PY, "-c", script], cwd=repo, env=env, capture_output=True, text=True,
                          timeout=120)
    assert told.returncode == 0, told.stderr
    ok, again = told.stdout.split()
    assert ok == "False"
    assert int(again) > 2000         # glibc's defaults: fresh pages for the second array


def test_a_run_leaves_scikit_learn_to_the_model_file_child(demo_dir, tmp_path):
    """A shuffled k-fold ``fitladder run`` never imports scikit-learn (nor skops) in its
    main process: the forked child writes ``model.skops``, which still loads and predicts
    as the pack's own coefficient table."""
    import pandas as pd

    from engine.pack import load_pipeline

    out = tmp_path / "pack"
    data = demo_dir / "calibration_curve.csv"
    argv = ["fitladder", "run", str(data), "--target", "bath_temp_C", *FAST, "--out", str(out)]
    script = ("import atexit, json, os, sys\n"
              "main_pid = os.getpid()\n"
              "def said():\n"
              "    if os.getpid() == main_pid:\n"
              "        print('main imported ' + json.dumps(sorted(\n"
              "            m for m in ('sklearn', 'skops') if m in sys.modules)))\n"
              "atexit.register(said)\n"
              f"sys.argv = {argv!r}\n"
              "from engine.cli import entry\n"
              "entry()\n")
    repo = Path(__file__).resolve().parents[1]
    proc = _run([PY, "-c", script], cwd=repo, env={"PYTHONPATH": str(repo)})
    assert proc.returncode == 0, proc.stderr
    said = [line for line in proc.stdout.splitlines() if line.startswith("main imported ")]
    assert said == ["main imported []"], proc.stdout
    pipe = load_pipeline(out / "model.skops")
    coef = pd.read_csv(out / "model_coefficients.csv")
    x = pd.read_csv(data)["probe_mV"].to_numpy(float)
    powers = [0 if t == "intercept" else int(t.split("^")[1]) if "^" in t else 1
              for t in coef["term"]]
    by_hand = sum(c * x ** p for c, p in zip(coef["coefficient"], powers))
    np.testing.assert_allclose(pipe.predict(pd.DataFrame({"probe_mV": x})), by_hand,
                               rtol=1e-9)
