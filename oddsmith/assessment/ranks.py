"""Ranks with ties, shared by the metrics (DeLong) and the features stage's leakage screen.

A module of its own so that the features stage does not import the metrics module: an edit
of the metrics then reruns the rules from the fits on, never the data stages.
"""

from __future__ import annotations

import numpy as np


def midranks(values) -> np.ndarray:
    """Ranks 1..n of ``values`` with ties given the mean of their ranks (what
    ``scipy.stats.rankdata`` returns by default, to the bit; the tests compare them).

    Examples
    --------
    >>> midranks([0.3, 0.1, 0.3, 0.2]).tolist()
    [3.5, 1.0, 3.5, 2.0]
    """
    values = np.asarray(values)
    order = np.argsort(values, kind="stable")
    ordered = values[order]
    starts = np.flatnonzero(np.concatenate(([True], ordered[1:] != ordered[:-1])))
    ends = np.append(starts[1:], ordered.shape[0])
    ranks = np.empty(ordered.shape[0])
    ranks[order] = np.repeat(0.5 * (starts + 1 + ends), ends - starts)
    return ranks
