"""Test helper: read one of the published hub-and-spoke test problems (2009) into an Instance.

The files live outside the project (``../shared/external/hub-spoke-2009/``, see
``../shared/external/README.md``) and are read in place, never copied. Format: tau; the number of
legs and one ``origin destination capacity`` line per leg; the number of
itineraries and one ``origin destination class fare`` line per itinerary; then
one line per period, ``t`` followed by tab-separated ``[ o d c ]  p`` pairs.
An itinerary between two spokes flies origin->hub->destination (hub = 0).
Total demand is a sum of independent Bernoulli trials: mean = sum_t p_t,
variance = sum_t p_t (1 - p_t).
"""

from __future__ import annotations

import pathlib
import re

import numpy as np

from decomp import Instance

HUB = 0
_PAIR = re.compile(r"\[\s*(\d+)\s+(\d+)\s+(\d+)\s*\]\s+([-+0-9.eE]+)")


#: Published DLP values (Topaloglu 2009, Tables 2 and 3, rounded to whole units; see
#: ../shared/external/README.md).
PUBLISHED = {
    "rm_200_4_1.0_4.0": 21531, "rm_200_4_1.0_8.0": 34571, "rm_200_4_1.2_4.0": 19882,
    "rm_200_4_1.2_8.0": 32922, "rm_200_4_1.6_4.0": 17530, "rm_200_4_1.6_8.0": 30570,
    "rm_200_5_1.0_4.0": 22144, "rm_200_5_1.0_8.0": 35387, "rm_200_5_1.2_4.0": 21263,
    "rm_200_5_1.2_8.0": 34495, "rm_200_5_1.6_4.0": 18870, "rm_200_5_1.6_8.0": 32081,
    "rm_200_6_1.0_4.0": 22300, "rm_200_6_1.0_8.0": 35544, "rm_200_6_1.2_4.0": 20932,
    "rm_200_6_1.2_8.0": 34172, "rm_200_6_1.6_4.0": 18592, "rm_200_6_1.6_8.0": 31824,
    "rm_200_8_1.0_4.0": 20052, "rm_200_8_1.0_8.0": 31835, "rm_200_8_1.2_4.0": 18952,
    "rm_200_8_1.2_8.0": 30727, "rm_200_8_1.6_4.0": 16833, "rm_200_8_1.6_8.0": 28608,
}


def _data_lines(path):
    for line in pathlib.Path(path).read_text().splitlines():
        s = line.strip()
        if s and not s.startswith("#"):
            yield s


def read(path) -> Instance:
    path = pathlib.Path(path)
    lines = _data_lines(path)
    tau = int(next(lines))
    n_legs = int(next(lines))
    legs = []
    for _ in range(n_legs):
        o, d, cap = next(lines).split()
        legs.append((f"L{o}-{d}", f"S{o}", f"S{d}", float(cap)))
    n_itin = int(next(lines))
    itins = []
    for _ in range(n_itin):
        o, d, c, fare = next(lines).split()
        itins.append((int(o), int(d), int(c), float(fare)))
    index = {(o, d, c): k for k, (o, d, c, _) in enumerate(itins)}
    mean = np.zeros(n_itin)
    var = np.zeros(n_itin)
    periods = 0
    for line in lines:
        t, rest = line.split(None, 1)
        periods += 1
        for o, d, c, p in _PAIR.findall(rest):
            p = float(p)
            k = index[(int(o), int(d), int(c))]
            mean[k] += p
            var[k] += p * (1.0 - p)
    if periods != tau:
        raise ValueError(f"{path}: {periods} period lines, expected {tau}")
    products = []
    for k, (o, d, c, fare) in enumerate(itins):
        if o == HUB or d == HUB:
            route = [f"L{o}-{d}"]
        else:
            route = [f"L{o}-{HUB}", f"L{HUB}-{d}"]
        products.append((f"I{o}-{d}-{c}", route, fare, mean[k], float(np.sqrt(var[k]))))
    return Instance.from_lists(legs, products, meta={"name": path.stem, "source": str(path)})


def read_periods(path):
    """(Instance, PeriodDemand): the instance of :func:`read` and its per-period request probabilities."""
    from decomp.dynamic.demand import PeriodDemand

    path = pathlib.Path(path)
    inst = read(path)
    index = {pid: k for k, pid in enumerate(inst.product_ids.tolist())}
    lines = list(_data_lines(path))
    tau = int(lines[0])
    n_legs = int(lines[1])
    n_itin = int(lines[2 + n_legs])
    prob = np.zeros((tau, inst.n_products))
    for row, line in enumerate(lines[3 + n_legs + n_itin:]):
        _, rest = line.split(None, 1)
        for o, d, c, p in _PAIR.findall(rest):
            prob[row, index[f"I{o}-{d}-{c}"]] += float(p)
    return inst, PeriodDemand(prob, source=f"{path.name} (per-period probabilities as published)")
