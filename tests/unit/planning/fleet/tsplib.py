"""TSPLIB instances burma14 and ulysses16 (Reinelt 1991, TSPLIB 95) and TSPLIB's GEO distance.

Coordinates as published in TSPLIB 95 (files ``burma14.tsp``, ``ulysses16.tsp``), in TSPLIB's degrees.minutes
notation; the GEO distance formula is the one of the TSPLIB 95 documentation.
"""

import math

import numpy as np

BURMA14 = [
    (16.47, 96.10), (16.47, 94.44), (20.09, 92.54), (22.39, 93.37), (25.23, 97.24), (22.00, 96.05),
    (20.47, 97.02), (17.20, 96.29), (16.30, 97.38), (14.05, 98.12), (16.53, 97.38), (21.52, 95.59),
    (19.41, 97.13), (20.09, 94.55),
]  # fmt: skip
ULYSSES16 = [
    (38.24, 20.42), (39.57, 26.15), (40.56, 25.32), (36.26, 23.12), (33.48, 10.54), (37.56, 12.19),
    (38.42, 13.11), (37.52, 20.44), (41.23, 9.10), (41.17, 13.05), (36.08, -5.21), (38.47, 15.13),
    (38.15, 15.35), (37.51, 15.17), (35.49, 14.32), (39.36, 19.56),
]  # fmt: skip
#: Published optimal tour lengths (Reinelt 1991, TSPLIB 95).
OPTIMUM = {"burma14": 3323, "ulysses16": 6859}


def _rad(x: float) -> float:
    deg = int(x)
    return 3.141592 * (deg + 5.0 * (x - deg) / 3.0) / 180.0


def geo_matrix(coords) -> np.ndarray:
    """TSPLIB's GEO distance: ``int(RRR acos(½((1+q1) q2 − (1−q1) q3)) + 1)``, ``RRR = 6378.388``."""
    n = len(coords)
    d = np.zeros((n, n))
    for i, (la1, lo1) in enumerate(coords):
        for j, (la2, lo2) in enumerate(coords):
            if i != j:
                q1 = math.cos(_rad(lo1) - _rad(lo2))
                q2 = math.cos(_rad(la1) - _rad(la2))
                q3 = math.cos(_rad(la1) + _rad(la2))
                d[i, j] = int(6378.388 * math.acos(0.5 * ((1.0 + q1) * q2 - (1.0 - q1) * q3)) + 1.0)
    return d
