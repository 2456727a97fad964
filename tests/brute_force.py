"""Reference computations written from definitions, shared by tests (never used by perierr)."""

import numpy as np


def mean_over_orderings(k, value):
    """Shapley values from the definition: the mean over all k! orders of each player's increment of ``value``.

    ``value(subset)`` takes a sorted tuple of player indices (Shapley 1953); each subset is evaluated once.
    """
    import itertools

    cache = {}
    out = np.zeros(k)
    orders = list(itertools.permutations(range(k)))
    for order in orders:
        before = ()
        for i in order:
            now = tuple(sorted(before + (i,)))
            for s in (before, now):
                if s not in cache:
                    cache[s] = value(s)
            out[i] += cache[now] - cache[before]
            before = now
    return out / len(orders)
