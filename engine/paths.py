"""Coefficient paths: each term's standardised coefficient against the penalty.

For one order, the model is fitted on all rows for a fine grid of penalties in
every swept family (ridge, lasso, elastic net), from one summary of the rows.
From the lasso path follow the order in which terms enter (the largest
penalty at which each term's coefficient is first non-zero) and, for the
recommended cell, which inputs keep at least one non-zero term.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .design import PolynomialBasis
from .families import RawMap, TermSummary, fit_family
from .labels import family_text
from .sweep import piece_statistics

PATH_POINTS = 60


@dataclass
class CoefficientPaths:
    """Paths of one order on all rows.

    Attributes
    ----------
    order : the order.
    table : one row per (family, l1_ratio, penalty, term): ``std_coef`` on
        standardised raw terms, ``nonzero``, and ``recommended`` marking the
        recommended cell's setting.
    entry : lasso entry order: ``rank``, ``term``, ``inputs``, ``entry_penalty``
        (largest grid penalty with a non-zero coefficient); terms that never
        enter on the grid are left out.
    survivors : per input: terms in the model, terms with a non-zero
        coefficient in the recommended cell, largest |standardised coefficient|,
        ``kept``.
    recommended : (family, l1_ratio, penalty) of the recommended cell, or None.
    notes : plain sentences.
    """

    order: int
    table: pd.DataFrame
    entry: pd.DataFrame
    survivors: pd.DataFrame
    recommended: tuple[str, float, float] | None = None
    notes: list[str] = field(default_factory=list)


def term_inputs(basis: PolynomialBasis, p: int) -> list[list[str]]:
    """Names of the inputs each of the first ``p`` terms uses."""
    return [[basis.input_names[j] for j in np.flatnonzero(e)] for e in basis.terms[:p]]


def path_penalties(summary: TermSummary, raw: RawMap, penalties, l1_ratio: float = 1.0,
                   points: int = PATH_POINTS) -> np.ndarray:
    """A log grid from the smallest positive penalty up to where every coefficient is 0.

    For the lasso / elastic net the top is ``max |X'y| / (n * l1_ratio)`` on
    standardised terms (no term enters above it); the grid also holds every
    given penalty.
    """
    from .families.base import standardise

    pen = np.asarray([p for p in penalties if p > 0], float)
    lo = float(pen.min()) if pen.size else 1e-4
    hi = float(pen.max()) if pen.size else 1e3
    if summary.p and l1_ratio > 0:
        st = standardise(summary, raw)
        top = float(np.abs(st.c / summary.n[:, None]).max()) / l1_ratio
        if top > 0:
            hi = top * 1.2
            lo = min(lo, top * 1e-4)
            pen = pen[pen <= hi]
    grid = np.logspace(np.log10(lo), np.log10(hi), points)
    return np.unique(np.r_[grid, pen])[::-1]


def coefficient_paths(data, spec, order: int, recommended=None, penalties=None,
                      points: int = PATH_POINTS) -> CoefficientPaths:
    """Coefficient paths of ``order`` on all rows, for every family of ``spec``.

    Parameters
    ----------
    data : prepared data (``X``, ``y``).
    spec : the request (`engine.spec.SweepSpec`): families, mixing parameters,
        penalties, interactions.
    order : the polynomial order whose terms are traced.
    recommended : a `engine.recommend.Cell` (or None) whose setting is marked
        and whose surviving inputs are listed.
    penalties : the penalty grid (default: `path_penalties` per family).
    points : grid size of the default grid.

    Returns
    -------
    CoefficientPaths
    """
    X = np.asarray(data.X, float)
    y = np.asarray(data.y, float)
    basis = PolynomialBasis.fit(X, spec.inputs, order, spec.interactions)
    p = basis.n_terms_at(order)
    stats = piece_statistics(basis, X, y, np.zeros(y.size, dtype=np.int64), 1)
    idx = np.arange(p)
    summary = TermSummary.select(stats.n, stats.mean, stats.comoment, idx)
    A, a0 = basis.raw_map()
    raw = RawMap.select(A, a0, idx, 1)
    names = basis.names(order)
    inputs = term_inputs(basis, p)
    rec_key = None
    if recommended is not None:
        rec_key = (str(recommended.family), float(recommended.l1_ratio),
                   float(recommended.penalty))
    pairs = list(spec.family_pairs())
    if ("lasso", 1.0) not in pairs:
        pairs.append(("lasso", 1.0))           # the entry order needs the lasso path
    frames = []
    lasso_path = None
    for fam, ratio in pairs:
        grid = (np.asarray(penalties, float) if penalties is not None else
                path_penalties(summary, raw, spec.penalties, ratio if fam != "ridge" else 0.0,
                               points))
        if rec_key and rec_key[0] == fam and np.isclose(rec_key[1], ratio) and rec_key[2] > 0:
            grid = np.unique(np.r_[grid, rec_key[2]])[::-1]
        grid = grid[grid > 0]
        fit = fit_family(fam, summary, raw, grid, l1_ratio=ratio)
        W = fit.w_std[0]                      # (p, K)
        if fam == "lasso":
            lasso_path = (grid, W)
        if fam not in spec.families:
            continue
        K = grid.size
        is_rec = np.zeros(K, bool)
        if rec_key and rec_key[0] == fam and np.isclose(rec_key[1], ratio):
            is_rec = np.isclose(grid, rec_key[2], rtol=1e-12, atol=0)
        frames.append(pd.DataFrame({
            "family": fam, "l1_ratio": float(ratio),
            "setting": family_text(fam, ratio),
            "penalty": np.repeat(grid, p), "term": np.tile(names, K),
            "inputs": np.tile([", ".join(v) for v in inputs], K),
            "std_coef": W.T.ravel(), "nonzero": (W.T != 0).ravel(),
            "recommended": np.repeat(is_rec, p)}))
    table = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(
        columns=["family", "l1_ratio", "setting", "penalty", "term", "inputs", "std_coef",
                 "nonzero", "recommended"])
    entry = _entry_order(lasso_path, names, inputs)
    survivors, notes = _survivors(data, spec, order, recommended, basis, names, inputs)
    notes.insert(0, f"Paths fitted on all {y.size} rows (not per split); coefficients are per "
                    "standard deviation of each term, so terms compare directly.")
    return CoefficientPaths(order=int(order), table=table, entry=entry, survivors=survivors,
                            recommended=rec_key, notes=notes)


def _entry_order(lasso_path, names, inputs) -> pd.DataFrame:
    rows = []
    if lasso_path is not None:
        grid, W = lasso_path                  # grid descending
        nz = W != 0
        for j in range(len(names)):
            hit = np.flatnonzero(nz[j])
            if hit.size:
                rows.append((int(hit[0]), float(grid[hit[0]]), names[j], ", ".join(inputs[j])))
    rows.sort(key=lambda r: (r[0], r[2]))
    return pd.DataFrame({"rank": np.arange(1, len(rows) + 1, dtype=int),
                         "term": [r[2] for r in rows], "inputs": [r[3] for r in rows],
                         "entry_penalty": [r[1] for r in rows]})


def _survivors(data, spec, order, recommended, basis, names, inputs):
    notes: list[str] = []
    cols = ["input", "terms", "nonzero_terms", "largest_abs_std_coef", "kept"]
    if recommended is None or int(recommended.order) != int(order):
        return pd.DataFrame(columns=cols), notes
    from .final_fit import fit_final
    model = fit_final(data.X, data.y, spec.inputs, int(order), float(recommended.penalty),
                      spec.interactions, target=spec.target, family=recommended.family,
                      l1_ratio=recommended.l1_ratio)
    w = np.asarray(model.std_coefficients, float)
    nz = w != 0
    rows = []
    for name in spec.inputs:
        use = np.array([name in v for v in inputs], bool)
        k = int(np.sum(use))
        rows.append((name, k, int(np.sum(nz & use)),
                     float(np.max(np.abs(w[use]))) if k else 0.0, bool(np.any(nz & use))))
    out = pd.DataFrame(rows, columns=cols)
    kept = int(out["kept"].sum())
    if recommended.family == "ridge" or float(recommended.penalty) == 0:
        notes.append("The recommended cell has no lasso-type penalty: every input keeps a "
                     "non-zero coefficient; ridge shrinks but does not select.")
    else:
        notes.append(f"{kept} of {len(spec.inputs)} inputs keep a non-zero term in the "
                     "recommended cell.")
    return out.sort_values(["kept", "largest_abs_std_coef"], ascending=[False, False],
                           kind="stable").reset_index(drop=True), notes
