"""The feasible allocation recovered from the bid prices (decomp.lagrangian.recovery): within every
leg's capacity, the seats left to the dearest products first (facts of the linear program).
"""

from __future__ import annotations

import numpy as np
import pytest

from decomp import lagrangian as m_lagr
from decomp.generator import generate


def test_room_left_goes_to_the_dearest_seat_first():
    # Two products of deterministic demand (std = 0: revenue f min(x, mean), exact) on one
    # leg of 13 seats, each holding 5: the 3 seats left go to the 100 fare, not the 50
    # (the LP optimum; a fact of this linear program). On random allocations of a
    # generated Poisson network the pass keeps every leg within capacity and never lowers
    # the expected revenue (expected sales are nondecreasing in the allocation).
    from decomp.instance import Instance
    from decomp.lagrangian.recovery import _fill_dearest, scale_to_capacity

    inst = Instance(leg_ids=["L1"], leg_origin=["QA1"], leg_destination=["QB2"], capacity=[13.0],
                    product_ids=["P1", "P2"], leg_ptr=np.array([0, 1, 2]), leg_index=np.array([0, 0]),
                    fare=[100.0, 50.0], mean=[10.0, 10.0], std=[0.0, 0.0])
    net = m_lagr.Network(inst)
    y = _fill_dearest(net, np.array([5.0, 5.0]))
    assert y[0] == pytest.approx(8.0, rel=1e-9) and y[1] == 5.0
    assert net.revenue(y) == pytest.approx(100.0 * 8.0 + 50.0 * 5.0, rel=1e-9)

    inst = generate(300, seed=4)
    inst = inst.with_forecast(meta={**inst.meta, "distribution": "poisson"})
    net = m_lagr.Network(inst)
    rng = np.random.default_rng(2)
    for _ in range(5):
        y = rng.uniform(0.0, 2.0, net.n_products) * net.products.mean
        load = net.load(y)
        over = load > net.cap
        y = scale_to_capacity(net, y, load, over) if np.any(over) else y
        filled = _fill_dearest(net, y)
        assert np.all(net.load(filled) <= net.cap * (1.0 + 1e-12) + 1e-12)
        assert np.all(filled >= y)
        assert np.any(filled > y)
        assert net.revenue(filled) >= net.revenue(y) - 1e-9 * abs(net.revenue(y))
