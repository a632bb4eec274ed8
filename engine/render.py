"""Drawing charts to PNG and SVG (vl-convert) away from the caller's work.

vl-convert keeps Python's interpreter lock for most of a drawing, so charts
drawn in a background thread stall the thread that goes on computing (measured:
a loop of Python work ran at about a tenth of its speed while a thread drew).
`ChartRenderer` therefore draws in a child process when it may fork one (a
process with a single thread that has not started vl-convert itself, such as
the command line): the child starts vl-convert at once, while the caller
still computes, and draws every batch of charts sent to it. Elsewhere (the
dashboard's server runs threads) one background thread draws the batches.
Either way each chart is laid out once: the PNG is rasterised from the SVG.

This module imports neither Altair nor vl-convert until it draws.
"""
from __future__ import annotations

import os
import sys
import threading
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any

__all__ = ["ChartRenderer", "render_spec", "warm"]

Drawn = dict[str, tuple[bytes, str]]


def render_spec(spec: dict, scale: float = 2) -> tuple[bytes, str]:
    """Render one Vega-Lite specification to ``(png_bytes, svg_text)``, laid out once."""
    import vl_convert as vlc

    svg = vlc.vegalite_to_svg(spec)
    return vlc.svg_to_png(svg, scale=scale), svg


def warm() -> None:
    """Start vl-convert (its first drawing pays a start-up cost of about half a second)."""
    import vl_convert as vlc

    vlc.vegalite_to_svg({"data": {"values": [{"a": 1}]}, "mark": "point",
                         "encoding": {"x": {"field": "a", "type": "quantitative"}}})


def _as_spec(chart: Any) -> dict:
    """A Vega-Lite dict of an Altair chart (or a dict as it is).

    Not validated again against the Vega-Lite schema: the charts are built by
    `engine.charts`, whose tests validate every kind.
    """
    return chart.to_dict(validate=False) if hasattr(chart, "to_dict") else chart


def _render_all(specs: dict[str, dict], scale: float) -> Drawn:
    return {stem: render_spec(spec, scale) for stem, spec in specs.items()}


def _child_loop(jobs, answers, parent_ends) -> None:
    """Child-process body: start vl-convert, then draw each batch received.

    Drawings are sent back by a second thread, so the next batch is drawn
    while the parent has not yet collected the last. Any failure ends the
    child with status 1 and no output; the parent then draws what is missing
    itself.
    """
    import queue

    for conn in parent_ends:   # so that the jobs pipe ends when the parent goes
        conn.close()
    done: queue.Queue = queue.Queue()

    def send() -> None:
        try:
            while True:
                answers.send(done.get())
        except BaseException:  # noqa: BLE001 - the parent draws instead
            os._exit(1)

    threading.Thread(target=send, daemon=True).start()
    try:
        warm()
        while True:
            specs, scale = jobs.recv()
            done.put(_render_all(specs, scale))
    except BaseException:  # noqa: BLE001 - the parent draws instead (or has gone)
        os._exit(1)


def _widen(conn, size: int = 1 << 20) -> None:
    """Let the pipe under ``conn`` hold ``size`` bytes where the system allows (Linux).

    A batch of specifications larger than the default 64 KiB would otherwise
    make the caller wait, as it sends, until the child has finished drawing the
    batches before it; drawings sent back likewise wait for nobody.
    """
    try:
        import fcntl

        fcntl.fcntl(conn.fileno(), fcntl.F_SETPIPE_SZ, size)
    except (ImportError, AttributeError, OSError):   # other systems, or over the limit
        pass


def _may_fork() -> bool:
    import multiprocessing as mp

    return (threading.active_count() == 1 and "vl_convert" not in sys.modules
            and "fork" in mp.get_all_start_methods())


class _Batch:
    """One batch sent to the child: `result` waits for its drawings (future-like)."""

    def __init__(self, renderer: "ChartRenderer", index: int, specs: dict, scale: float):
        self._renderer, self._index, self._specs, self._scale = renderer, index, specs, scale

    def result(self) -> Drawn:
        return self._renderer._collect(self._index, self._specs, self._scale)


class ChartRenderer:
    """Draws batches of charts to ``{stem: (png_bytes, svg_text)}`` off the caller's thread.

    Parameters
    ----------
    fork : draw in a forked child process when this process may fork one
        (see the module notes); otherwise in a background thread.

    Use as a context manager, or call `close` when done; `submit` returns an
    object whose ``result()`` gives the drawings (the child's batches are
    answered in the order sent).
    """

    def __init__(self, fork: bool = False) -> None:
        self._proc = self._jobs = self._answers_out = None
        self._pool: ThreadPoolExecutor | None = None
        self._answers: list[Drawn] = []
        self._sent = 0
        if fork and _may_fork():
            import multiprocessing as mp

            ctx = mp.get_context("fork")
            jobs_in, self._jobs = ctx.Pipe(duplex=False)
            self._answers_out, answers_in = ctx.Pipe(duplex=False)
            _widen(self._jobs)
            _widen(answers_in)
            self._proc = ctx.Process(
                target=_child_loop, name="fitladder-charts", daemon=True,
                args=(jobs_in, answers_in, (self._jobs, self._answers_out)))
            self._proc.start()
            jobs_in.close()
            answers_in.close()

    @property
    def in_child(self) -> bool:
        """True while a child process draws."""
        return self._proc is not None

    def submit(self, charts: dict[str, Any], scale: float = 2):
        """Start drawing ``charts`` (Altair charts or Vega-Lite dicts); returns a future."""
        if self._proc is None:  # one thread draws the batches in turn
            if self._pool is None:
                self._pool = ThreadPoolExecutor(max_workers=1,
                                                thread_name_prefix="fitladder-charts")
            future: Future = self._pool.submit(
                lambda: _render_all({s: _as_spec(c) for s, c in charts.items()}, scale))
            return future
        specs = {stem: _as_spec(ch) for stem, ch in charts.items()}
        index = self._sent
        try:
            self._jobs.send((specs, scale))
            self._sent += 1
        except (OSError, ValueError):
            self._stop()
        return _Batch(self, index, specs, scale)

    def _collect(self, index: int, specs: dict, scale: float) -> Drawn:
        while self._proc is not None and len(self._answers) <= index:
            try:
                self._answers.append(self._answers_out.recv())
            except (EOFError, OSError):  # the child failed: draw here
                self._stop()
        if index < len(self._answers):
            return self._answers[index]
        return _render_all(specs, scale)

    def _stop(self) -> None:
        if self._proc is not None:
            self._proc.join(timeout=5)
            if self._proc.is_alive():  # pragma: no cover - a hung child
                self._proc.kill()
                self._proc.join()
        self._proc = None
        for conn in (self._jobs, self._answers_out):
            if conn is not None:
                conn.close()
        self._jobs = self._answers_out = None

    def close(self) -> None:
        """End the child and wait for it; a thread finishes the batches sent and ends.

        The child holds no files, so it is simply ended; drawings nobody
        collected are not needed.
        """
        if self._pool is not None:
            self._pool.shutdown(wait=False)
            self._pool = None
        if self._proc is not None:
            self._proc.kill()
        self._stop()

    def __enter__(self) -> "ChartRenderer":
        return self

    def __exit__(self, *exc) -> None:
        self.close()
