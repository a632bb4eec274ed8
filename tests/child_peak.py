"""Run command-line cases in child processes and measure each one's peak memory.

Used by tests/test_hostile_input.py: ``python tests/child_peak.py < cases.json``
reads a JSON list of argument lists, imports the engine once, then forks one
child per case; the child runs ``engine.cli.main(argv)`` with its stderr sent
to a file. The parent collects each child with ``os.wait4`` whose resource
usage gives the child's peak resident memory (``ru_maxrss``, KiB on Linux;
it includes the interpreter and the libraries already imported). Prints a
JSON list of ``{"code", "peak_mb", "stderr", "seconds"}``.
"""
from __future__ import annotations

import json
import os
import sys
import tempfile
import time
import warnings


def _child(argv: list[str], err_path: str) -> None:
    fd = os.open(err_path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    os.dup2(fd, 2)
    os.dup2(os.open(os.devnull, os.O_WRONLY), 1)
    sys.stderr = os.fdopen(2, "w", buffering=1)
    sys.stdout = open(os.devnull, "w")
    code = 1
    try:
        from engine.cli import main
        code = main(argv)
    except SystemExit as exc:  # argparse usage errors
        code = exc.code if isinstance(exc.code, int) else 2
    except BaseException as exc:  # noqa: BLE001 - reported as exit 99
        print(f"probe: {type(exc).__name__}: {exc}", file=sys.stderr)
        code = 99
    finally:
        sys.stderr.flush()
        os._exit(int(code or 0))


def main() -> int:
    cases = json.load(sys.stdin)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import engine.cli  # noqa: F401 - imported once, before the forks
        import engine.loading  # noqa: F401
        import engine.pack  # noqa: F401
    results = []
    with tempfile.TemporaryDirectory() as tmp:
        for i, argv in enumerate(cases):
            err_path = os.path.join(tmp, f"err{i}.txt")
            start = time.perf_counter()
            pid = os.fork()
            if pid == 0:
                _child(argv, err_path)
            _, status, usage = os.wait4(pid, 0)
            code = os.waitstatus_to_exitcode(status)
            with open(err_path, encoding="utf-8", errors="replace") as fh:
                err = fh.read()
            results.append({"code": code, "peak_mb": usage.ru_maxrss / 1024.0,
                            "stderr": err, "seconds": time.perf_counter() - start})
    json.dump(results, sys.stdout)
    return 0


if __name__ == "__main__":
    sys.exit(main())
