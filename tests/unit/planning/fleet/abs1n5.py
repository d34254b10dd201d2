"""Archetti, Bertazzi, Laporte & Speranza (2007), *Transportation Science* 41(3), instance abs1n5
(the paper's public benchmark data, distributed by the authors at the University of Brescia), read by us as a
cyclic one-truck problem."""

import math

import numpy as np

CAPACITY = 289.0
SUPPLIER = (154, 417)
# x, y, I0, U (largest level), L (lowest level), r (use per period), h (low holding cost)
RETAILERS = [
    (172, 334, 130, 195, 0, 65, 0.02),
    (267, 87, 70, 105, 0, 35, 0.03),
    (148, 433, 58, 116, 0, 58, 0.03),
    (355, 444, 48, 72, 0, 24, 0.02),
    (38, 152, 11, 22, 0, 11, 0.02),
]
HIGH_HOLDING = (0.23, 0.32, 0.33, 0.23, 0.18)
#: DERIVED by us by exhaustive search over all 1 944 cycle/offset choices.
BEST_PER_DAY = {"low": 581.79, "high": 629.79}


def points():
    return [SUPPLIER] + [(x, y) for x, y, *_ in RETAILERS]


def nint_matrix() -> np.ndarray:
    """Distances NINT(Euclidean), as in the instance files (rounded to the nearest integer)."""
    p = points()
    return np.array([[math.floor(math.dist(a, b) + 0.5) for b in p] for a in p], dtype=float)


def holding(variant: str) -> np.ndarray:
    return np.array([r[6] for r in RETAILERS] if variant == "low" else HIGH_HOLDING)


def demand() -> np.ndarray:
    return np.array([r[5] for r in RETAILERS], dtype=float)


def longest() -> np.ndarray:
    """``⌊U_i / r_i⌋`` = 3, 3, 2, 3, 2."""
    return np.array([r[3] // r[5] for r in RETAILERS])
