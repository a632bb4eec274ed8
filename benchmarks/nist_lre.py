"""Print the log relative error (LRE) of the final fit on the NIST StRD linear sets.

LRE = -log10(|estimate - certified| / |certified|), capped at 15; the minimum over
each set's coefficients is the usual score. Data and certified values:
tests/reference/nist (NIST Statistical Reference Datasets).

Usage: python benchmarks/nist_lre.py
"""
from __future__ import annotations

import json
import os
import sys
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))

from engine import fit_final  # noqa: E402

REF = Path(__file__).resolve().parent.parent / "tests" / "reference" / "nist"


def main() -> int:
    cert = json.loads((REF / "certified.json").read_text())
    worst = 15.0
    for name, c in cert.items():
        d = pd.read_csv(REF / f"{name}.csv")
        cols = [k for k in d.columns if k != "y"]
        m = fit_final(d[cols].to_numpy(float), d["y"].to_numpy(float), cols,
                      c["polynomial_degree"] or 1)
        ref = np.array(c["certified_coefficients"])
        err = np.abs(m.coefficients - ref)
        with np.errstate(divide="ignore"):
            lre = np.minimum(np.where(ref != 0, -np.log10(err / np.abs(ref)), -np.log10(err)), 15)
        worst = min(worst, float(lre.min()))
        print(f"{name:9s} coefficients {len(ref):2d}  min LRE {lre.min():5.1f}  "
              f"condition number {m.condition_number:.3g}")
    print(f"min_lre {worst:.1f} (required >= 10 on every set: {'pass' if worst >= 10 else 'FAIL'})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
