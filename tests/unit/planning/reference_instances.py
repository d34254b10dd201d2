"""Published JRP instances (sources named per row) and values derived from them (rows cited by id).

JRP data are in the sources' own units (years unless noted); ``g = h d / 2`` is the
holding term the core calls ``H``.
"""

import numpy as np

# id: (K, k, h, d, exact m, exact T, exact C, LB, PoT fixed base 1, PoT optimised base)
JRP = {
    # J1: Silver (1976) numerical example, data PUBLISHED in stockpyl `silver_jrp`; exact, LB and PoT DERIVED
    "J1": (
        10,
        [1.87, 5.27, 7.94, 8.19, 8.87],
        [0.2] * 5,
        [1736, 656, 558, 170, 142],
        [1, 1, 2, 3, 3],
        0.2455575897,
        218.2515857,
        216.1176329,
        220.09,
        219.2004927,
    ),
    # J2: Silver, Pyke & Peterson (1998) p. 428, PUBLISHED in stockpyl `spp_jrp` and its test
    "J2": (
        40,
        [15] * 4,
        [0.24] * 4,
        [86000, 12500, 1400, 3000],
        [1, 1, 4, 3],
        0.07617340262784976,
        2067.650840930354,
        2054.153244,
        2084.5,
        2072.172773,
    ),
    # J3: stockpyl instance `scmo_jrp_ex` (PUBLISHED in stockpyl); PoT fixed = 860 exactly (DERIVED)
    "J3": (
        600,
        [120, 840, 300],
        [160, 20, 50],
        [1, 1, 1],
        [1, 3, 1],
        3.103164454170876,
        837.8544026261366,
        836.5081086,
        860.0,
        844.6300966,
    ),
    # J4: stockpyl `scmo_jrp_hw_1` (PUBLISHED in stockpyl tests)
    "J4": (
        20000,
        [36000, 46000, 34000, 38000],
        [1000, 900, 1200, 1000],
        [1780, 445, 920, 175],
        [1, 2, 1, 3],
        0.24433405218634363,
        1028646.3597045067,
        1027778.572,
        1032375.0,
        1032104.646,
    ),
    # J5: stockpyl `scmo_jrp_hw_2` (PUBLISHED in stockpyl tests)
    "J5": (
        1500,
        [4000, 1000, 2000],
        [300, 200, 200],
        [9100, 83200, 20800],
        [3, 1, 2],
        0.017076411245211497,
        566083.0327787611,
        565223.8516,
        568312.5,
        568260.5037,
    ),
    # J6: stockpyl `scmo_jrp_hw_3` (PUBLISHED in stockpyl tests), h = 0.28 × [19, 14, 17, 14, 12]
    "J6": (
        180,
        [60, 100, 180, 115, 135],
        [5.32, 3.92, 4.76, 3.92, 3.36],
        [6200, 1300, 400, 4400, 1800],
        [1, 2, 4, 1, 2],
        0.11364657309360865,
        9107.181781429423,
        9087.335271,
        9148.5,
        9107.18178,
    ),
    # J7: Axsäter, Inventory Control 3e, Examples 7.2/7.3, data PUBLISHED in the R package AMInventory docs
    "J7": (
        300,
        [50] * 4,
        [10] * 4,
        [5000, 1000, 700, 100],
        [1, 1, 1, 3],
        0.1154700538,
        8082.903769,
        8081.091023,
        8112.5,
        8096.295449,
    ),
    # J9: DERIVED; the min m_i = 1 convention (unrestricted formula optimum m = (2, 3) is outside the class)
    "J9": (5, [400, 800], [1.0, 1.0], [50, 40], [1, 2], 3.519178, 457.493169, 454.228331, None, None),
}


def arrays(row):
    """``(K, k, H)`` of a JRP row with ``H = h d / 2``."""
    K, k, h, d = row[:4]
    return float(K), np.asarray(k, float), np.asarray(h, float) * np.asarray(d, float) / 2
