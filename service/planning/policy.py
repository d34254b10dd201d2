"""The record of a chosen joint policy before staggering."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Policy:
    """Whole-day cycles ``T_i = m_i T0`` with min ``m_i = 1``.

    ``class_cost = K / T0 + Σ (k_i / T_i + H_i T_i)``, the cost before staggering extras;
    ``next_cycles`` is each site's next longer cycle in the policy class (used to tell
    whether a cap shortened the cycle).
    """

    method: str
    base_days: int | None
    dispatch_interval: int
    cycles: np.ndarray
    next_cycles: np.ndarray
    class_cost: float
