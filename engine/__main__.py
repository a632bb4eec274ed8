"""``python -m engine``: the same command line as ``fitladder``."""
import sys

from .cli import main

sys.exit(main())
