"""The instance ladder: manifest, committed rungs, regeneration of the large rungs."""

from __future__ import annotations

import json

import numpy as np
import pytest

from decomp import io, ladder
from decomp.errors import ConfigError


def test_rung_names_agree_with_manifest():
    assert tuple(ladder.rungs()) == ladder.RUNGS


@pytest.mark.parametrize("name", [n for n in ladder.RUNGS if ladder.get_rung(n).committed])
def test_committed_rung_is_exactly_what_the_generator_makes(name, tmp_path):
    # The committed files must be the generator's output for the manifest entry, byte for byte.
    rung = ladder.get_rung(name)
    fresh = io.write_instance(ladder.build_rung(name), tmp_path / name, format=rung.format)
    committed = ladder.rung_path(name)
    for f in ("legs.csv", "products.csv", "meta.json"):
        assert (fresh / f).read_bytes() == (committed / f).read_bytes(), f
        # no file over 2 MiB in git (issue requirement)
        assert (committed / f).stat().st_size < 2 * 1024 * 1024


@pytest.mark.parametrize("name", [n for n in ladder.RUNGS if ladder.get_rung(n).committed])
def test_committed_rung_validates_with_every_leg_used(name, recwarn):
    inst = ladder.load_rung(name)
    assert inst.n_products == ladder.get_rung(name).products
    assert not [w for w in recwarn if issubclass(w.category, io.UnusedLegWarning)]


def test_generated_rung_is_regenerated_when_missing_or_stale(tmp_path, monkeypatch):
    # A private copy of the manifest with one small generated rung.
    doc = {"rungs": [{"name": "tiny", "products": 50, "seed": 3, "params": {"hubs": 1},
                      "committed": False, "format": "parquet"}]}
    (tmp_path / "ladder.json").write_text(json.dumps(doc))
    monkeypatch.setenv("DECOMP_INSTANCES", str(tmp_path))
    path = ladder.rung_path("tiny")
    assert path == tmp_path / "generated" / "tiny"
    first = ladder.load_rung("tiny")
    assert (path / "products.parquet").is_file()
    # stale: a different seed in meta.json makes load_rung regenerate
    meta = json.loads((path / "meta.json").read_text())
    meta["seed"] = 999
    (path / "meta.json").write_text(json.dumps(meta))
    again = ladder.load_rung("tiny")
    assert json.loads((path / "meta.json").read_text())["seed"] == 3
    assert np.array_equal(first.mean, again.mean)
    assert list(first.product_ids) == list(again.product_ids)
    read = ladder.load_rung("tiny")          # now up to date: read from the folder
    assert np.array_equal(read.mean, again.mean) and np.array_equal(read.leg_index, again.leg_index)
    assert list(read.product_extra) == list(again.product_extra)


def test_unknown_rung_lists_the_valid_names():
    with pytest.raises(ConfigError, match="p100"):
        ladder.rung_path("p7")
