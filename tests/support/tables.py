"""The hand-written instance tables the validation tests vary, and how they vary them.

``LEGS`` and ``PRODUCTS`` are the lines of a small valid instance (invented stations of a fictional
carrier); the expected rows and columns in the tests are read off them (row 1 is the first line
after the header).
"""

from __future__ import annotations

import pathlib

import pytest

from decomp.errors import InstanceError
from decomp.io import read_instance

LEGS = [
    "leg,origin,destination,capacity",
    "L1,KA1,HU2,100",
    "L2,HU2,BO3,80",
    "L3,BO3,HU2,50",
]
PRODUCTS = [
    "product,legs,fare,mean,std",
    "P1,L1,100,10,3",
    "P2,L1 L2,150,5,2",
    "P3,L2,90,8,2.5",
    "P4,L3,60,4,1",
]


def make(tmp_path: pathlib.Path, legs=LEGS, products=PRODUCTS, name="inst") -> pathlib.Path:
    d = tmp_path / name
    d.mkdir()
    if legs is not None:
        (d / "legs.csv").write_text("\n".join(legs) + "\n")
    if products is not None:
        (d / "products.csv").write_text("\n".join(products) + "\n")
    return d


def with_field(lines, row, col, value):
    """Copy of ``lines`` with data row ``row`` (1-based) field ``col`` set to ``value``."""
    out = list(lines)
    header = out[0].split(",")
    fields = out[row].split(",")
    fields[header.index(col)] = value
    out[row] = ",".join(fields)
    return out


def expect(path, file, row=None, column=None, match=None):
    with pytest.raises(InstanceError) as info:
        read_instance(path)
    err = info.value
    assert err.file is not None and pathlib.Path(err.file).name == file, str(err)
    assert err.row == row, str(err)
    assert err.column == column, str(err)
    if match:
        assert match in err.reason, str(err)
    return err
