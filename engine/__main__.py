"""``python -m engine``: the same command line as ``fitladder``."""
import gc
import sys

from .cli import main


def run() -> int:
    """The command line as a whole process (``python -m engine``, ``fitladder``).

    Once `main` returns, the process only ends: the objects it still holds are
    frozen out of the garbage collector's way, which otherwise traverses every
    one of them again as the interpreter shuts down (a few tenths of a second
    after the imports of a pack).
    """
    status = main()
    gc.freeze()
    return status


if __name__ == "__main__":
    sys.exit(run())
