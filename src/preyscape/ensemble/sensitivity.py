"""Which parameters an outcome hinges on: PRCC with p-values, and Sobol' indices.

Partial rank correlation coefficient (PRCC; Marino, Hogue, Ray & Kirschner
2008, J. Theor. Biol. 254:178): the parameters and the outcome are replaced by
their ranks; the rank of parameter j and the rank of the outcome are each
regressed linearly on the ranks of all other parameters, and the PRCC is the
Pearson correlation of the two residuals. It measures a monotone association
with the others held fixed, from −1 to 1. Its significance uses
T = r √((N − 2 − p) / (1 − r²)), Student's t with N − 2 − p degrees of
freedom, p the number of other parameters (the same paper).

First-order and total Sobol' indices (Saltelli et al. 2010, Comput. Phys.
Commun. 181:259) from the Saltelli design of
:mod:`preyscape.ensemble.design`, estimated by SALib
(``SALib.analyze.sobol.analyze``) with bootstrap confidence intervals: the
share of the outcome's variance due to a parameter alone (S1) and with all
its interactions (ST).

Examples
--------
>>> rng = np.random.default_rng(0)
>>> X = rng.uniform(size=(200, 2))
>>> r, p = prcc(X, X[:, 0] + 0.01 * rng.normal(size=200))
>>> bool(r[0] > 0.9 and p[0] < 1e-6 and abs(r[1]) < 0.3)
True
"""

from __future__ import annotations

import numpy as np

__all__ = ["prcc", "sobol_indices"]


def _residuals(a: np.ndarray, design: np.ndarray) -> np.ndarray:
    coef, *_ = np.linalg.lstsq(design, a, rcond=None)
    return a - design @ coef


def prcc(X: np.ndarray, y: np.ndarray, *, rank: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Partial rank correlation of ``y`` with each column of ``X``, and its p-value.

    Parameters
    ----------
    X : numpy.ndarray
        ``(N, D)`` parameter values (any units).
    y : numpy.ndarray
        ``(N,)`` outcome.
    rank : bool
        Use ranks (PRCC); False gives the plain partial correlation
        coefficient (keyword only).

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        Coefficients (−1 to 1) and two-sided p-values, one per column; NaN
        where undefined (a constant column or outcome, too few members:
        N ≤ D + 1).
    """
    from scipy.stats import rankdata, t

    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    n, d = X.shape
    if y.shape != (n,):
        raise ValueError(f"y must have shape ({n},), not {y.shape}")
    if rank:
        X = np.column_stack([rankdata(X[:, j]) for j in range(d)]) if d else X
        y = rankdata(y)
    coef = np.full(d, np.nan)
    pval = np.full(d, np.nan)
    dof = n - 2 - (d - 1)
    for j in range(d):
        others = np.column_stack([np.ones(n), np.delete(X, j, axis=1)])
        rx, ry = _residuals(X[:, j], others), _residuals(y, others)
        sx, sy = float(np.sqrt(rx @ rx)), float(np.sqrt(ry @ ry))
        if sx <= 1e-12 * max(1.0, float(np.abs(X[:, j]).max())) or sy <= 1e-12 * max(
                1.0, float(np.abs(y).max())):
            continue
        r = float(np.clip(rx @ ry / (sx * sy), -1.0, 1.0))
        coef[j] = r
        if dof > 0:
            if abs(r) >= 1.0:
                pval[j] = 0.0
            else:
                tt = r * np.sqrt(dof / (1.0 - r * r))
                pval[j] = float(2.0 * t.sf(abs(tt), dof))
    return coef, pval


def sobol_indices(y: np.ndarray, n_parameters: int, *, seed: int = 0,
                  resamples: int = 200) -> dict[str, np.ndarray]:
    """First-order and total Sobol' indices of an outcome of a Saltelli design.

    Parameters
    ----------
    y : numpy.ndarray
        The outcome of every member, in member order (N·(D + 2) values).
    n_parameters : int
        D, the number of parameters.
    seed : int
        Seed of SALib's bootstrap of the confidence intervals (keyword only).
    resamples : int
        Bootstrap resamples.

    Returns
    -------
    dict
        ``S1``, ``S1_conf``, ``ST``, ``ST_conf``: arrays of D values (the
        ``_conf`` entries are half-widths of 95 % intervals). All NaN when
        ``y`` has a non-finite value (a failed member) or no variance.
    """
    from SALib.analyze import sobol

    y = np.asarray(y, dtype=float)
    nan = {k: np.full(n_parameters, np.nan) for k in ("S1", "S1_conf", "ST", "ST_conf")}
    if y.size % (n_parameters + 2) or not np.all(np.isfinite(y)) or float(np.var(y)) == 0.0:
        return nan
    problem = {"num_vars": n_parameters, "names": [f"x{k}" for k in range(n_parameters)],
               "bounds": [[0.0, 1.0]] * n_parameters}
    import warnings

    with warnings.catch_warnings():  # SALib warns of outcomes constant in a sub-sample
        warnings.simplefilter("ignore", UserWarning)
        res = sobol.analyze(problem, y, calc_second_order=False, num_resamples=resamples,
                            conf_level=0.95, print_to_console=False, seed=seed)
    return {k: np.asarray(res[k], dtype=float) for k in ("S1", "S1_conf", "ST", "ST_conf")}
