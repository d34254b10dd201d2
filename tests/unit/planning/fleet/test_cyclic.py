"""The exhaustive cyclic search on Archetti, Bertazzi, Laporte & Speranza (2007) abs1n5."""

import numpy as np
import pytest

from service.planning.fleet.cyclic import choice_count, cyclic_search

from . import abs1n5


@pytest.mark.parametrize("variant", ["low", "high"])
def test_abs1n5_cyclic_optimum(variant):
    # Archetti, Bertazzi, Laporte & Speranza (2007), abs1n5 read as a cyclic problem (values DERIVED by us):
    # 581.79 per day (low holding), 629.79 (high); route cost 577 per day = (1 120 + 34) / 2.
    assert abs1n5.longest().tolist() == [3, 3, 2, 3, 2]
    assert choice_count(abs1n5.longest()) == 1944
    plan = cyclic_search(
        abs1n5.nint_matrix(),
        abs1n5.demand(),
        abs1n5.holding(variant),
        np.zeros(5),
        abs1n5.longest(),
        abs1n5.CAPACITY,
        dispatch_cost=0.0,
        cost_per_km=1.0,
    )
    assert plan.choices == 1944
    assert plan.cost_per_day == pytest.approx(abs1n5.BEST_PER_DAY[variant], abs=1e-9)
    assert plan.routing_per_day == pytest.approx(577.0)
    assert plan.cycles == (2, 2, 2, 2, 2)
    on_site_3 = plan.offsets[2]
    assert all(o != on_site_3 for k, o in enumerate(plan.offsets) if k != 2)  # site 3 on the other day
