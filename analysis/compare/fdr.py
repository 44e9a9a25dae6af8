"""Benjamini-Hochberg control of the false discovery rate over a table of tests.

A comparison asks one question per KPI and segment: 19 KPIs over 10 segments
are 190 intervals, and at 95 % each about ten of them exclude zero by chance
alone when nothing differs. The step-up procedure of Benjamini and Hochberg
[1] keeps the expected share of false calls among the calls at or below ``q``
(for independent or positively dependent tests, [1] Theorem 1 and [2]).

References
----------
.. [1] Y. Benjamini and Y. Hochberg, "Controlling the false discovery rate: a
   practical and powerful approach to multiple testing", J. R. Stat. Soc. B 57
   (1995) 289-300. doi:10.1111/j.2517-6161.1995.tb02031.x
.. [2] Y. Benjamini and D. Yekutieli, "The control of the false discovery rate
   in multiple testing under dependency", Ann. Statist. 29 (2001) 1165-1188.
   doi:10.1214/aos/1013699998
"""

from __future__ import annotations

import numpy as np

from analysis.errors import CompareError


def bh_adjust(p: np.ndarray) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (q-values); NaN entries are not tests.

    Parameters
    ----------
    p : ndarray
        p-values in [0, 1]; NaN marks a cell without a test (no interval, or an
        indicative KPI), which neither counts in the family nor gets a q-value. [-]

    Returns
    -------
    ndarray
        Same shape: ``q_(i) = min_{j >= i} min(1, m p_(j) / j)`` over the
        sorted finite p-values, NaN where ``p`` is NaN. A test is called at
        false discovery rate ``q`` exactly when its adjusted value is ``<= q``. [-]

    Notes
    -----
    [1] Section 3: with ``p_(1) <= ... <= p_(m)``, reject ``H_(1) ... H_(k)`` for
    the largest ``k`` with ``p_(k) <= k q / m``. The adjusted value is the
    smallest ``q`` at which a test is rejected.
    """
    x = np.asarray(p, dtype=float)
    out = np.full(x.shape, np.nan)
    flat = x.ravel()
    ok = np.flatnonzero(np.isfinite(flat))
    if ok.size == 0:
        return out
    vals = flat[ok]
    if np.any((vals < 0) | (vals > 1)):
        bad = vals[(vals < 0) | (vals > 1)][0]
        raise CompareError(f"p-values must lie in [0, 1], found {bad!r}.")
    m = vals.size
    order = np.argsort(vals, kind="stable")
    ranked = vals[order] * m / np.arange(1, m + 1)  # [1] Section 3, p_(k) m / k
    ranked = np.minimum.accumulate(ranked[::-1])[::-1]  # step-up: smallest over j >= k
    adj = np.empty(m)
    adj[order] = np.minimum(ranked, 1.0)
    res = out.ravel()
    res[ok] = adj
    return res.reshape(x.shape)


def bh_reject(p: np.ndarray, q: float = 0.05) -> np.ndarray:
    """Which tests the Benjamini-Hochberg procedure calls at false discovery rate ``q``.

    Parameters
    ----------
    p : ndarray
        p-values; NaN is no test (never called). [-]
    q : float
        False discovery rate, in (0, 1). [-]

    Returns
    -------
    ndarray of bool
    """
    if not 0.0 < q < 1.0:
        raise CompareError(f"The false discovery rate must lie between 0 and 1, found {q!r}.")
    adj = bh_adjust(p)
    return np.isfinite(adj) & (adj <= q)
