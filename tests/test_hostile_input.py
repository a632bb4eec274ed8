"""Hostile input on the command line: tampered records and the malformed corpus.

Every case must exit with status 2, name its cause, say what to do next, and
stay under 1 GB of peak memory; each runs in its own child process, measured
through ``resource`` usage (``os.wait4``, see tests/child_peak.py).
"""
from __future__ import annotations

import copy
import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from engine import SchemeSpec, SweepSpec
from engine.loading import load_table, prepare
from engine.pack import _data_facts, _roles, record_dict

HERE = Path(__file__).resolve().parent
PEAK_LIMIT_MB = 1024.0

#: Verbs that open an instruction; a message must hold one to count as saying what to do.
_DO = ("add|choose|give|save|export|load|remove|fix|check|use|run|rename|replace|tick|write|"
       "open|restore|correct|copy|delete|lower|reduce|raise|split|pick|select|convert|store|"
       "name|keep|drop|fill|list|make|upload|leave|free|sort|move|narrow|shorten|wait|try|"
       "decompress|unzip|re-save|resave|set|ask|type|enter|mark|turn|install|point")
_NEXT_STEP = re.compile(r"(?:^|[.;:!?]\s+|\(|\bor\s+|\band\s+|,\s+(?:or\s+|then\s+)?|\bthen\s+)"
                        rf"(?:please\s+)?(?:{_DO})\b", re.IGNORECASE)


def says_what_to_do(message: str) -> bool:
    """Whether ``message`` holds an instruction (an imperative verb opening a clause)."""
    return bool(_NEXT_STEP.search(message))


def test_next_step_detector_tells_instructions_from_bare_reports():
    assert says_what_to_do("'a.csv' is empty (0 bytes). Choose the file that holds the data.")
    assert says_what_to_do("It is outside the folder. If you mean it, add --data X.")
    assert not says_what_to_do("Singular matrix")
    assert not says_what_to_do("'r.json' is not a readable record (Expecting value: line 1).")
    assert not says_what_to_do("There is no column named 'z'. Numeric columns: 'x', 'y'.")


def run_cases(cases: list[list[str]], cwd: Path) -> list[dict]:
    """Run each argument list in a forked child of one fresh interpreter."""
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1",
               PYTHONPATH=str(HERE.parent) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    env.pop("FITLADDER_DEBUG", None)
    proc = subprocess.run([sys.executable, str(HERE / "child_peak.py")], input=json.dumps(cases),
                          capture_output=True, text=True, cwd=cwd, env=env, timeout=600)
    assert proc.returncode == 0, proc.stderr[-3000:]
    return json.loads(proc.stdout)


def check_refusal(result: dict, cause: str | list[str], label: str) -> None:
    err = result["stderr"]
    assert result["code"] == 2, (label, result)
    assert "Traceback" not in err, (label, err)
    message = err.strip().splitlines()[-1] if err.strip() else ""
    assert message.startswith("fitladder: "), (label, err)
    for word in ([cause] if isinstance(cause, str) else cause):
        assert word in message, (label, word, message)
    assert says_what_to_do(message), (label, message)
    assert result["peak_mb"] < PEAK_LIMIT_MB, (label, result["peak_mb"])


# ---------------------------------------------------------------------------
# tampered records
# ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def record_folder(tmp_path_factory):
    """A pack folder holding its data file and a genuine record of a small request."""
    folder = tmp_path_factory.mktemp("records") / "pack"
    folder.mkdir()
    data_path = folder / "bench.csv"
    data_path.write_text("x,y,z\n" + "".join(f"{i},{i * i + 1},{(7 * i) % 5}\n"
                                             for i in range(20)))
    loaded = load_table(data_path)
    data = prepare(loaded.frame, "y", ["x"])
    spec = SweepSpec("y", ("x",), max_order=3, penalties=(0.0, 0.1),
                     scheme=SchemeSpec("kfold", folds=4), seed=3)
    rec = record_dict(spec, _data_facts(data, loaded, "bench.csv"), _roles(data, spec),
                      [(1, 0.0), (2, 0.0)], {"decimal": None, "sheet": None},
                      str(data_path.resolve()))
    return folder, rec


def _set(rec: dict, dotted: str, value) -> dict:
    out = copy.deepcopy(rec)
    node = out
    keys = dotted.split(".")
    for k in keys[:-1]:
        node = node[int(k)] if isinstance(node, list) else node[k]
    last = keys[-1]
    if isinstance(node, list):
        node[int(last)] = value
    elif value is _DELETE:
        del node[last]
    else:
        node[last] = value
    return out


_DELETE = object()


def _swap_roles(rec: dict) -> dict:
    out = copy.deepcopy(rec)
    for part in (out["roles"], out["spec"]):
        part["target"], part["inputs"] = "x", ["y"]
    return out


def _rename_in_spec(rec: dict) -> dict:
    out = copy.deepcopy(rec)
    out["spec"]["inputs"] = ["z"]
    del out["request_sha256"]
    return out


def _rename_everywhere(rec: dict) -> dict:
    out = copy.deepcopy(rec)
    out["spec"]["inputs"] = ["w"]
    out["roles"]["inputs"] = ["w"]
    del out["request_sha256"]
    return out


#: name -> (record text or a change of the genuine record, extra arguments, cause words)
TAMPERED = {
    "seed_as_text": (lambda r: _set(_set(r, "spec.seed", "7"), "seed", "7"), [], "seed"),
    "seed_as_float": (lambda r: _set(r, "spec.seed", 1.5), [], "spec.seed"),
    "seed_negative": (lambda r: _set(r, "spec.seed", -4), [], "spec.seed"),
    "penalty_as_text": (lambda r: _set(r, "spec.penalties.1", "lots"), [], "spec.penalties[1]"),
    "penalty_negative": (lambda r: _set(r, "spec.penalties.1", -1), [], "spec.penalties[1]"),
    "compare_cell_short": (lambda r: _set(r, "compare_cells", [[1]]), [], "compare_cells[0]"),
    "compare_cell_text": (lambda r: _set(r, "compare_cells", [["one", 0]]), [],
                          "compare_cells[0][0]"),
    "spec_unknown_key": (lambda r: _set(r, "spec.colour", "red"), [], ["'colour'", "spec"]),
    "record_unknown_key": (lambda r: _set(r, "notes", "mine"), [], "'notes'"),
    "scheme_unknown": (lambda r: _set(r, "spec.scheme.kind", "weekly"), [], "spec.scheme.kind"),
    "one_fold": (lambda r: _set(r, "spec.scheme.folds", 1), [], "spec.scheme.folds"),
    "holdout_above_one": (lambda r: _set(r, "spec.scheme.holdout_fraction", 1.5), [],
                          "spec.scheme.holdout_fraction"),
    "order_huge": (lambda r: _set(r, "spec.max_order", 1000), [], "spec.max_order"),
    "no_inputs": (lambda r: _set(r, "spec.inputs", []), [], "spec.inputs"),
    "learning_size_zero": (lambda r: _set(r, "spec.learning_sizes.0", 0), [],
                           "spec.learning_sizes[0]"),
    "decimal_mark_odd": (lambda r: _set(r, "load_options.decimal", ";"), [],
                         "load_options.decimal"),
    "sheet_negative": (lambda r: _set(r, "load_options.sheet", -1), [], "load_options.sheet"),
    "sha_not_hex": (lambda r: _set(r, "data.sha256", "xyz"), [], "data.sha256"),
    "format_other": (lambda r: _set(r, "format", "fitladder-record/9"), [], "format"),
    "spec_missing": (lambda r: _set(r, "spec", _DELETE), [], "'spec'"),
    "path_climbs_out": (lambda r: _set(r, "data.path", "../../etc/passwd"), [],
                        ["outside the record's folder", "../../etc/passwd"]),
    "path_absolute_elsewhere": (lambda r: _set(_set(r, "data.path", "/etc/hostname"),
                                               "data.file", "hostname"), [],
                                ["outside the record's folder", "/etc/hostname"]),
    "data_is_a_device": (lambda r: r, ["--data", "/dev/zero"], "not a regular file"),
    "roles_swapped": (_swap_roles, [], "changed after the pack was written"),
    "input_renamed_in_spec": (_rename_in_spec, [], ["contradicts itself", "inputs"]),
    "input_renamed_everywhere": (_rename_everywhere, [], ["'w'", "no column"]),
    "not_json": ("this is not a record\n", [], "not valid JSON"),
    "nested_too_deep": ("[" * 200_000, [], "nests its JSON too deeply"),
    "nan_seed": (lambda r: json.dumps(_set(r, "spec.seed", float("nan"))), [], "spec.seed"),
    "huge_file": (" " * (2 * 1024 * 1024) + "{}", [], "far more than a record holds"),
}


#: cases whose record folder holds no data file (a file of the recorded name next to the
#: record would be used instead of the recorded path, after its SHA-256 check)
NOTHING_BESIDE = {"path_climbs_out", "path_absolute_elsewhere"}


def _changed_data_case(folder: Path, rec: dict, tmp: Path) -> tuple[Path, list[str]]:
    other = tmp / "changed"
    other.mkdir()
    (other / "bench.csv").write_bytes((folder / "bench.csv").read_bytes().replace(b"5,", b"6,"))
    (other / "record.json").write_text(json.dumps(_set(rec, "data.path", "bench.csv")))
    return other / "record.json", []


def test_tampered_records_are_refused_with_cause_and_next_step(record_folder, tmp_path):
    folder, rec = record_folder
    assert len(TAMPERED) + 1 >= 15
    cases, labels, causes = [], [], []
    for name, (change, extra, cause) in TAMPERED.items():
        where = tmp_path / name
        where.mkdir()
        if name not in NOTHING_BESIDE:  # the data file next to the record, as in a shared pack
            (where / "bench.csv").write_bytes((folder / "bench.csv").read_bytes())
        if isinstance(change, str):
            text = change
        else:
            changed = change(rec)
            text = changed if isinstance(changed, str) else json.dumps(changed, indent=1)
        (where / "record.json").write_text(text)
        cases.append(["rerun", str(where / "record.json"), *extra, "--out",
                      str(tmp_path / "out" / name)])
        labels.append(name)
        causes.append(cause)
    path, extra = _changed_data_case(folder, rec, tmp_path)
    cases.append(["rerun", str(path), *extra, "--out", str(tmp_path / "out" / "changed")])
    labels.append("data_changed")
    causes.append(["SHA-256", "not the one recorded"])
    results = run_cases(cases, tmp_path)
    for label, cause, result in zip(labels, causes, results):
        check_refusal(result, cause, label)
    outs = tmp_path / "out"  # nothing was written for any of them
    assert not outs.exists() or not list(outs.iterdir())


def test_genuine_record_passes_the_checks(record_folder):
    from engine.record import check_record, request_fingerprint

    _, rec = record_folder
    spec = check_record(json.loads(json.dumps(rec)))
    assert spec.seed == 3 and spec.inputs == ("x",)
    assert request_fingerprint(rec) == rec["request_sha256"]


# ---------------------------------------------------------------------------
# --out: never clobbered, never half-written
# ---------------------------------------------------------------------------
FAST = ["--max-order", "2", "--penalties", "0,0.1"]


def _call(argv, capsys) -> tuple[int, str]:
    from engine.cli import main
    try:
        code = main(argv)
    except SystemExit as exc:
        code = exc.code
    return code, capsys.readouterr().err


def _run_args(demo_dir, out) -> list[str]:
    return ["run", str(demo_dir / "calibration_curve.csv"), "--target", "bath_temp_C", *FAST,
            "--out", str(out)]


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in folder.iterdir()}


def _complete_looking(root: Path) -> list[Path]:
    """Every folder under ``root`` that holds a summary.json."""
    return sorted(p.parent for p in root.rglob("summary.json"))


@pytest.fixture(scope="module")
def old_pack(tmp_path_factory, demo_dir):
    """A finished pack written by the command line (seed 1), to be replaced."""
    import contextlib
    import io

    from engine.cli import main
    out = tmp_path_factory.mktemp("old") / "pack"
    with contextlib.redirect_stderr(io.StringIO()), contextlib.redirect_stdout(io.StringIO()):
        assert main(_run_args(demo_dir, out) + ["--seed", "1"]) == 0
    return out


def test_out_with_foreign_files_is_refused_without_overwrite(demo_dir, tmp_path, capsys):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "summary.md").write_text("my own minutes\n")
    (out / "budget.xlsx").write_bytes(b"PK\x03\x04 not really")
    code, err = _call(_run_args(demo_dir, out), capsys)
    assert code == 2
    assert "did not write" in err and "'budget.xlsx'" in err and "--overwrite" in err
    assert says_what_to_do(err)
    assert (out / "summary.md").read_text() == "my own minutes\n"  # untouched
    assert sorted(p.name for p in out.iterdir()) == ["budget.xlsx", "summary.md"]
    # with --overwrite the pack replaces its own file names and keeps the rest
    code, err = _call(_run_args(demo_dir, out) + ["--overwrite"], capsys)
    assert code == 0, err
    assert (out / "budget.xlsx").read_bytes() == b"PK\x03\x04 not really"
    assert "my own minutes" not in (out / "summary.md").read_text()
    assert json.loads((out / "summary.json").read_text())["roles"]["target"] == "bath_temp_C"
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # nothing left over


def test_a_pack_replaces_an_earlier_pack_whole(old_pack, demo_dir, tmp_path, capsys):
    import shutil
    out = tmp_path / "pack"
    shutil.copytree(old_pack, out)
    code, err = _call(_run_args(demo_dir, out) + ["--seed", "2"], capsys)
    assert code == 0, err  # a folder holding only an earlier pack needs no --overwrite
    record = json.loads((out / "record.json").read_text())
    assert record["seed"] == 2


def test_unwritable_out_is_refused_before_reading(demo_dir, tmp_path, capsys, monkeypatch):
    import engine.loading
    def no_reading(*a, **k):
        raise AssertionError("the data was read before --out was checked")
    monkeypatch.setattr(engine.loading, "load_table", no_reading)
    blocker = tmp_path / "a_file"
    blocker.write_text("x")
    for out in (blocker, blocker / "pack"):
        code, err = _call(_run_args(demo_dir, out), capsys)
        assert code == 2, err
        assert "Choose" in err or "Give" in err
        assert says_what_to_do(err)


def test_second_run_into_a_locked_folder_is_refused(demo_dir, tmp_path, capsys):
    import fcntl
    out = tmp_path / "pack"
    lock = tmp_path / ".pack.fitladder-lock"
    with open(lock, "w") as fh:
        fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)  # as a run in progress holds it
        code, err = _call(_run_args(demo_dir, out), capsys)
    assert code == 2 and "Another run is writing" in err and says_what_to_do(err)
    assert not out.exists()


@pytest.mark.parametrize("with_old", [False, True], ids=["new folder", "over an earlier pack"])
def test_full_disk_leaves_no_summary_json(old_pack, demo_dir, tmp_path, capsys, monkeypatch,
                                          with_old):
    import errno
    import shutil
    out = tmp_path / "pack"
    if with_old:
        shutil.copytree(old_pack, out)
        before = _snapshot(out)
    real = Path.write_text
    written = []

    def filling_up(self, text, *args, **kwargs):
        written.append(self.name)
        if self.suffix == ".svg" and len(written) > 3:  # the disk fills during the burst
            raise OSError(errno.ENOSPC, "No space left on device", str(self))
        return real(self, text, *args, **kwargs)

    monkeypatch.setattr(Path, "write_text", filling_up)
    code, err = _call(_run_args(demo_dir, out), capsys)
    assert code == 2, err
    assert "disk is full" in err and says_what_to_do(err)
    assert len(written) > 3  # the failure came mid-write, after several files
    if with_old:
        assert _snapshot(out) == before  # the earlier pack, whole and unmixed
        assert _complete_looking(tmp_path) == [out]
    else:
        assert not out.exists()
        assert _complete_looking(tmp_path) == []
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


_PAUSING_RUN = r"""
import sys, time
import engine.pack as pack
real = pack.write_csv
calls = []
def pausing(frame, path):
    calls.append(path)
    if len(calls) == 2:        # several files are on disk by now; summary.json is not
        print("WRITING", file=sys.stderr, flush=True)
        time.sleep(120)
    return real(frame, path)
pack.write_csv = pausing
from engine.cli import main
sys.exit(main(sys.argv[1:]))
"""


def test_run_killed_mid_write_leaves_no_complete_looking_folder(old_pack, demo_dir, tmp_path):
    # SIGTERM: the run removes its half-written folder; even without that (SIGKILL) the
    # half-written folder is a hidden sibling without summary.json, and --out keeps the
    # earlier pack whole, because the new pack is moved into place only when complete
    sig = "SIGTERM"
    import shutil
    import signal
    out = tmp_path / "pack"
    shutil.copytree(old_pack, out)  # an earlier pack is there; a new one is being written
    before = _snapshot(out)
    env = dict(os.environ, PYTHONPATH=str(HERE.parent) + os.pathsep
               + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.Popen([sys.executable, "-c", _PAUSING_RUN,
                             *_run_args(demo_dir, out)[0:], "--seed", "5"],
                            stderr=subprocess.PIPE, stdout=subprocess.DEVNULL, text=True,
                            env=env)
    try:
        for line in proc.stderr:
            if line.startswith("WRITING"):
                break
        else:
            pytest.fail("the run ended before writing")
        proc.send_signal(getattr(signal, sig))
        proc.wait(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    rest = proc.stderr.read()
    if sig == "SIGTERM":
        assert proc.returncode == 143, rest
        assert "stopped" in rest
        assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # cleaned up
    assert _snapshot(out) == before  # the earlier pack, unmixed
    assert _complete_looking(tmp_path) == [out]  # the half-written one has no summary.json


# ---------------------------------------------------------------------------
# the malformed corpus through the whole command line
# ---------------------------------------------------------------------------
MALFORMED = HERE / "malformed"


def _corpus_argv(name: str, entry: dict, out: Path) -> list[str]:
    argv = ["run", str(MALFORMED / name)]
    if "args" in entry:
        argv += list(entry["args"])
    else:
        roles = entry.get("prepare") or {"target": "y"}
        argv += ["--target", roles["target"]]
        if roles.get("inputs"):
            argv += ["--inputs", ",".join(roles["inputs"])]
        if roles.get("order_column"):
            argv += ["--order-column", roles["order_column"], "--scheme", "blocked"]
    if (entry.get("load") or {}).get("decimal") == ",":
        argv.append("--decimal-comma")
    return argv + ["--out", str(out / name)]


def test_every_malformed_file_is_refused_by_a_run_within_1_gb(tmp_path):
    expected = json.loads((MALFORMED / "expected.json").read_text(encoding="utf-8"))
    names = sorted(expected)
    results = run_cases([_corpus_argv(n, expected[n], tmp_path / "out") for n in names],
                        tmp_path)
    for name, result in zip(names, results):
        want = expected[name]["message"]
        check_refusal(result, want, name)
    outs = tmp_path / "out"
    assert not outs.exists() or not list(outs.iterdir())
