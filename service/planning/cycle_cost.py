"""The cost of one site's replenishment cycle and its convex minimisers.

Every cost in the core is of the form ``c(T) = a / T + H T`` (Harris 1913): an ordering
cost ``a`` paid once per cycle of ``T`` days plus the holding cost ``H T`` of the average
cycle stock ``d T / 2`` at ``h`` per unit per day (``H = h d / 2``). ``c`` is convex on
``T > 0`` with free minimiser ``T* = sqrt(a / H)`` and minimum ``2 sqrt(a H)``.
"""

from __future__ import annotations

import numpy as np


def cycle_cost(a, H, T):
    """Cost per day ``a / T + H T`` of a cycle of ``T`` (``a / T`` read as 0 when ``a = 0``).

    Parameters
    ----------
    a, H, T : array_like
        Ordering cost per cycle, holding term ``h d / 2`` and cycle length (``T > 0``).
    """
    a, H, T = np.asarray(a, float), np.asarray(H, float), np.asarray(T, float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        fixed = np.where(a > 0, a / T, 0.0)
        hold = np.where(H > 0, H * T, 0.0)
    return fixed + hold


def free_cycle(a, H):
    """Unconstrained minimiser ``sqrt(a / H)`` of :func:`cycle_cost` (``inf`` when ``H = 0``)."""
    a, H = np.asarray(a, float), np.asarray(H, float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        return np.where(H > 0, np.sqrt(a / np.where(H > 0, H, 1.0)), np.inf)


def best_multiple(a, H, step, lo, hi):
    """Integer ``m`` in ``[lo, hi]`` minimising ``c(m · step)``, elementwise.

    ``c(m · step)`` is convex in ``m``, so the minimiser is the better of the floor and the
    ceiling of ``T* / step`` clipped to ``[lo, hi]`` (ties go to the smaller ``m``).
    """
    x = free_cycle(a, H) / step
    below = np.clip(np.floor(np.minimum(x, np.float64(2**62))), lo, hi).astype(np.int64)
    above = np.minimum(below + 1, hi)
    better_above = cycle_cost(a, H, above * step) < cycle_cost(a, H, below * step)
    return np.where(better_above, above, below)


def best_exponent(a, H, base, lo, hi):
    """Integer ``p`` in ``[lo, hi]`` minimising ``c(base · 2**p)``, elementwise.

    ``c(base · 2**p) = a 2**-p / base + H base 2**p`` is a sum of convex functions of ``p``,
    so the minimiser is the better of the floor and the ceiling of ``log2(T* / base)``
    clipped to ``[lo, hi]`` (ties go to the smaller ``p``).
    """
    with np.errstate(divide="ignore"):
        x = np.log2(free_cycle(a, H) / base)
    below = np.clip(np.floor(np.clip(x, -1e6, 1e6)), lo, hi).astype(np.int64)
    above = np.minimum(below + 1, hi)
    better_above = cycle_cost(a, H, base * np.exp2(above)) < cycle_cost(a, H, base * np.exp2(below))
    return np.where(better_above, above, below)
