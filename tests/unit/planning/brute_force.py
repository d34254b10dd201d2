"""Brute-force enumeration of whole-day joint policies (small instances only)."""

import itertools

import numpy as np


def class_costs(K, k, H, whole_days, allowed):
    """Min cost ``K / min T + Σ (k_i/T_i + H_i T_i)`` over cycle vectors with ``allowed(T, T0)``.

    Parameters
    ----------
    allowed : callable
        ``allowed(T, T0) -> bool array`` on a ``(combos, n)`` array of cycles and their minimum.
    """
    grids = [np.arange(1, u + 1) for u in whole_days]
    T = np.array(list(itertools.product(*grids)), dtype=np.int64)
    T0 = T.min(axis=1)
    ok = allowed(T, T0)
    cost = K / T0 + (k / T + H * T).sum(axis=1)
    return float(cost[ok].min())


def integer_multiples(T, T0):
    return (T % T0[:, None] == 0).all(axis=1)


def powers_of_two(T, T0):
    ratio = T // T0[:, None]
    return integer_multiples(T, T0) & ((ratio & (ratio - 1)) == 0).all(axis=1)


def fixed_base(base):
    def allowed(T, T0):
        ratio = T // base
        return ((T % base) == 0).all(axis=1) & ((ratio & (ratio - 1)) == 0).all(axis=1)

    return allowed
