"""``python -m engine``: the same command line as ``fitladder``."""
from .cli import entry

entry()
