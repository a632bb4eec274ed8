"""Chart drawing off the caller's thread (`engine.render`): same drawings in a child process,
in a thread and in the caller, and a failed child is made up for."""
from __future__ import annotations

import json
import os
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from engine import render

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG signature, ISO/IEC 15948 section 5.2
REPO = Path(__file__).resolve().parents[1]

SPECS = {
    "points": {"data": {"values": [{"a": i, "b": i * i} for i in range(12)]}, "mark": "point",
               "encoding": {"x": {"field": "a", "type": "quantitative"},
                            "y": {"field": "b", "type": "quantitative"}}},
    "bars": {"data": {"values": [{"k": "x", "v": 3}, {"k": "y", "v": 5}]}, "mark": "bar",
             "encoding": {"x": {"field": "k", "type": "nominal"},
                          "y": {"field": "v", "type": "quantitative"}}},
}

# Runs in a fresh interpreter: one thread and vl-convert not started, so the renderer forks.
CHILD_SCRIPT = r"""
import json, os, sys
from engine import render
specs = json.loads(sys.stdin.read())
r = render.ChartRenderer(fork=True)
assert r.in_child, "expected a child process"
first = r.submit({"points": specs["points"]})
second = r.submit({"bars": specs["bars"]}, scale=1)
a, b = first.result(), second.result()
pid = r._proc.pid
if os.environ.get("KILL_CHILD"):
    r._proc.kill(); r._proc.join()
    third = r.submit({"bars": specs["bars"]}).result()   # the parent draws it
    b = {**b, "bars_after_kill": third["bars"]}
r.close()
assert r._proc is None
out = {k: [v[0].hex(), v[1]] for k, v in {**a, **b}.items()}
json.dump(out, sys.stdout)
"""


def _run_child(kill: bool = False) -> dict:
    env = dict(os.environ, PYTHONPATH=str(REPO))
    if kill:
        env["KILL_CHILD"] = "1"
    proc = subprocess.run([sys.executable, "-c", CHILD_SCRIPT], input=json.dumps(SPECS),
                          capture_output=True, text=True, env=env, cwd=REPO, timeout=120)
    assert proc.returncode == 0, proc.stderr
    return {k: (bytes.fromhex(png), svg) for k, (png, svg) in json.loads(proc.stdout).items()}


def _check_drawing(png: bytes, svg: str) -> None:
    assert png[:8] == PNG_MAGIC
    assert ET.fromstring(svg).tag.endswith("svg")   # well-formed XML


def test_child_process_draws_what_the_caller_would():
    got = _run_child()
    assert set(got) == {"points", "bars"}
    for stem, scale in (("points", 2), ("bars", 1)):
        png, svg = got[stem]
        _check_drawing(png, svg)
        here_png, here_svg = render.render_spec(SPECS[stem], scale)
        assert svg == here_svg
        assert png == here_png


def test_a_dead_child_is_made_up_for_in_the_caller():
    got = _run_child(kill=True)
    png, svg = got["bars_after_kill"]
    _check_drawing(png, svg)
    assert svg == render.render_spec(SPECS["bars"])[1]


def test_thread_when_the_process_may_not_fork():
    render.warm()                  # vl-convert started here: forking now would be unsafe
    with render.ChartRenderer(fork=True) as r:
        assert not r.in_child
        drawn = r.submit(SPECS).result()
    assert set(drawn) == set(SPECS)
    for stem, (png, svg) in drawn.items():
        _check_drawing(png, svg)
        assert svg == render.render_spec(SPECS[stem])[1]


def test_uncollected_batches_end_the_child_at_close():
    script = CHILD_SCRIPT.split("first = ")[0] + (
        "for _ in range(3):\n"
        "    r.submit(specs)\n"
        "p = r._proc\n"
        "r.close()\n"
        "print(p.exitcode)\n")
    env = dict(os.environ, PYTHONPATH=str(REPO))
    proc = subprocess.run([sys.executable, "-c", script], input=json.dumps(SPECS),
                          capture_output=True, text=True, env=env, cwd=REPO, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert int(proc.stdout.strip()) == -9     # ended (SIGKILL), not waited for


@pytest.mark.parametrize("scale", [1, 2])
def test_render_spec_scales_the_png(scale):
    import struct

    png, _ = render.render_spec(SPECS["bars"], scale)
    width = struct.unpack(">I", png[16:20])[0]   # IHDR width, ISO/IEC 15948 section 11.2.2
    base, _ = render.render_spec(SPECS["bars"], 1)
    assert width == scale * struct.unpack(">I", base[16:20])[0]


def test_thread_batches_are_drawn_by_one_thread_in_turn():
    import threading

    render.warm()
    seen = []
    real = render._render_all

    def recording(specs, scale):
        seen.append((threading.current_thread().name, sorted(specs)))
        return real(specs, scale)

    render._render_all = recording
    try:
        r = render.ChartRenderer()
        jobs = [r.submit({stem: spec}) for stem, spec in SPECS.items()]
        r.close()                       # batches already sent are still drawn
        drawn = [j.result() for j in jobs]
    finally:
        render._render_all = real
    assert [sorted(d) for d in drawn] == [[s] for s in SPECS]
    assert [names for _, names in seen] == [[s] for s in SPECS]      # in the order sent
    assert len({name for name, _ in seen}) == 1                      # by one thread


def test_command_line_draws_its_charts_in_a_child_process(tmp_path, demo_dir):
    """`fitladder run` never starts vl-convert itself; the pack still holds every chart."""
    out = tmp_path / "pack"
    script = ("import sys\n"
              "from engine.cli import main\n"
              f"rc = main(['run', {str(demo_dir / 'calibration_curve.csv')!r}, '--target', "
              f"'bath_temp_C', '--out', {str(out)!r}])\n"
              "print('RESULT', rc, 'vl_convert' in sys.modules)\n")
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                          env=dict(os.environ, PYTHONPATH=str(REPO)), cwd=REPO, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip().splitlines()[-1] == "RESULT 0 False"
    from engine.pack import CHART_FILES

    for stem in CHART_FILES:
        _check_drawing((out / f"{stem}.png").read_bytes(),
                       (out / f"{stem}.svg").read_text(encoding="utf-8"))
