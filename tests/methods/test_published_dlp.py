"""The DLP on the published hub-and-spoke test problems against their published values.

Source: H. Topaloglu, "Using Lagrangian relaxation to compute capacity-dependent
bid prices in network revenue management", Operations Research 57(3), 2009,
Tables 2 and 3 (DLP optimal values, rounded to whole units), as listed in
../shared/external/README.md (beside the folder hub-spoke-2009/). The files are read in place.
"""

import pytest

from decomp import solve

from support.hubspoke import PUBLISHED, read
from support.paths import EXTERNAL

pytestmark = [pytest.mark.solver, pytest.mark.external]

@pytest.fixture(scope="module")
def folder():
    if not EXTERNAL.is_dir():
        pytest.skip(f"published hub-and-spoke test problems not found at {EXTERNAL} "
                    "(outside data, not part of the project)")
    return EXTERNAL


@pytest.mark.parametrize("name", sorted(PUBLISHED))
def test_dlp_matches_published_value(folder, name):
    path = folder / f"{name}.txt"
    if not path.exists():
        pytest.skip(f"{path} is missing from the published set")
    inst = read(path)
    n = int(name.split("_")[2])
    assert inst.n_legs == 2 * n and inst.n_products == 2 * n * (n + 1)     # README: 2N legs, 2N(N+1) itineraries
    r = solve(inst, "dlp", "highs")
    assert r.ok
    assert r.objective == pytest.approx(PUBLISHED[name], abs=0.5)
    assert r.certificate.dual_value == pytest.approx(r.objective, rel=1e-10)
