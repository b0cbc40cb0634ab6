"""The DLP on the published hub-and-spoke test problems against their published values.

Source: H. Topaloglu, "Using Lagrangian relaxation to compute capacity-dependent
bid prices in network revenue management", Operations Research 57(3), 2009,
Tables 2 and 3 (DLP optimal values, rounded to whole units), as listed in
../shared/external/README.md (beside the folder hub-spoke-2009/). The files are read in place.
"""

import pathlib

import pytest

from decomp import solve

from hubspoke import read   # tests/hubspoke.py (pytest puts tests/ on sys.path)

EXTERNAL = pathlib.Path(__file__).resolve().parents[1].parent / "shared" / "external" / "hub-spoke-2009"

pytestmark = [pytest.mark.solver, pytest.mark.external]

# Published DLP values (Tables 2 and 3 of the paper above).
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
