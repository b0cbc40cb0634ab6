"""Smoke tests of the data commands through decomp.cli.main (exit codes: 0 ok, 2 bad input)."""

from __future__ import annotations

import pytest

from decomp import io
from decomp.cli import main


def test_generate_validate_inspect(tmp_path, capsys):
    out = tmp_path / "net"
    assert main(["generate", "--products", "200", "--seed", "4", "--out", str(out),
                 "--hubs", "2", "--spokes", "5", "--banks", "2", "--fare-classes", "3",
                 "--demand-factor", "0.9", "1.2", "--cv", "0.2", "0.4", "--no-two-stop"]) == 0
    assert "200 products" in capsys.readouterr().out
    inst = io.read_instance(out)
    assert inst.meta["params"]["two_stop"] is False and inst.legs_per_product.max() == 2
    assert main(["validate", str(out)]) == 0
    assert "valid:" in capsys.readouterr().out
    assert main(["inspect", str(out), "--top", "3"]) == 0
    text = capsys.readouterr().out
    for part in ("legs per product", "demand factor per leg", "most loaded legs", "fare:"):
        assert part in text


def test_generate_parquet(tmp_path):
    assert main(["generate", "--products", "50", "--out", str(tmp_path / "p"), "--format", "parquet"]) == 0
    assert (tmp_path / "p" / "products.parquet").is_file()


def test_validate_invalid_exits_2(tmp_path, capsys):
    d = tmp_path / "bad"
    d.mkdir()
    (d / "legs.csv").write_text("leg,origin,destination,capacity\nL1,AA1,BB2,-4\n")
    (d / "products.csv").write_text("product,legs,fare,mean,std\nP1,L1,10,1,1\n")
    assert main(["validate", str(d)]) == 2
    err = capsys.readouterr().err
    assert "legs.csv" in err and "row 1" in err and "capacity" in err


def test_validate_prints_unused_leg_warning(tmp_path, capsys):
    d = tmp_path / "w"
    d.mkdir()
    (d / "legs.csv").write_text("leg,origin,destination,capacity\nL1,AA1,BB2,4\nL2,BB2,AA1,4\n")
    (d / "products.csv").write_text("product,legs,fare,mean,std\nP1,L1,10,1,1\n")
    assert main(["validate", str(d)]) == 0
    assert "used by no product" in capsys.readouterr().out


def test_bad_generator_option_exits_2(tmp_path):
    assert main(["generate", "--products", "100", "--out", str(tmp_path / "x"), "--fare-ratio", "2"]) == 2
    assert not (tmp_path / "x").exists()


def test_generate_refuses_a_foreign_folder(tmp_path):
    (tmp_path / "keep.txt").write_text("x")
    assert main(["generate", "--products", "20", "--out", str(tmp_path)]) == 2
    assert (tmp_path / "keep.txt").read_text() == "x"


def test_ladder_list(capsys):
    assert main(["ladder"]) == 0
    text = capsys.readouterr().out
    assert "p100" in text and "p1m" in text


@pytest.mark.parametrize("cmd", ["generate", "validate", "inspect", "ladder"])
def test_help(cmd, capsys):
    assert main([cmd, "--help"]) == 0              # argparse's exit, returned as the exit code
    assert cmd in capsys.readouterr().out


def test_inspect_rejects_a_non_positive_top(capsys):
    assert main(["inspect", "any-folder", "--top", "0"]) == 2     # refused before the folder is read
    assert "--top" in capsys.readouterr().err
