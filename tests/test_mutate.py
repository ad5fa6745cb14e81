"""Point mutations in silico (PDBFixer side chains, χ1/χ2 chosen clear of cofactors)."""
import numpy as np
import pytest
import yaml

from siteshift.study.config import ConfigError, check_config
from siteshift.structures.mutate import MutationError, choose_rotamer, mutate, parse_mutation


def test_parse_mutation():
    assert parse_mutation("A:L121E") == ("A", "LEU", 121, "", "GLU")
    assert parse_mutation("L:H168aF") == ("L", "HIS", 168, "a", "PHE")
    with pytest.raises(MutationError, match="CHAIN:XnY"):
        parse_mutation("L121E")


def test_mutation_keeps_pigments_and_clears_them(root, tmp_path, library):
    from siteshift.structures.inventory import take_inventory
    from siteshift.structures.reading import read_structure
    out = tmp_path / "m.pdb"
    rep = mutate(root / "config/demo/pcd2_wt.pdb", ["A:I6E"], out)
    atoms = read_structure(out)
    res = atoms.select_atoms("chainID A and resid 6")
    assert res.resnames[0] == "GLU" and {"OE1", "OE2", "CD"} <= set(res.names)
    # PDBFixer alone put OE1 1.5 Å from the pigment's O2; the χ search keeps ≥ 2.2 Å
    assert rep["closest_A"]["A:I6E"] > 2.2
    pig = atoms.select_atoms("resname HC4")
    side = res.select_atoms("not backbone")
    d = np.linalg.norm(side.positions[:, None] - pig.positions[None], axis=-1).min()
    assert d > 2.2
    # bond lengths of the rebuilt side chain stay chemical (rigid rotations only)
    x = {a.name: a.position for a in res}
    assert 1.3 < np.linalg.norm(x["CG"] - x["CD"]) < 1.7
    rows = take_inventory(atoms, library)
    assert [r["pigment_id"] for r in rows] == ["A_HC4101", "B_HC4101"]
    assert len(atoms.select_atoms("resname HOH")) == 3


def test_wrong_wild_type_is_named(root, tmp_path):
    with pytest.raises(MutationError, match="is ILE, not LEU"):
        mutate(root / "config/demo/pcd2_wt.pdb", ["A:L6E"], tmp_path / "x.pdb")


def test_rotamer_search_moves_away_from_a_blocker():
    # a Glu side chain pointing at a blocking atom is turned away by χ1/χ2
    names = ["N", "CA", "C", "O", "CB", "CG", "CD", "OE1", "OE2"]
    x = np.array([[1.46, 0, 0], [0, 0, 0], [-0.55, 1.42, 0], [-1.2, 1.7, 1.0], [-0.53, -0.78, -1.2],
                  [-0.1, -2.2, -1.2], [-0.6, -3.0, -2.4], [-1.7, -2.8, -2.9], [0.1, -3.9, -2.8]])
    blocker = np.array([[0.3, -4.2, -3.0]])
    before = np.linalg.norm(x[5:] - blocker, axis=1).min()
    newx, d = choose_rotamer(names, x, "GLU", blocker)
    assert d > before + 1.0
    assert np.allclose(newx[:5], x[:5])  # backbone and CB do not move


def test_config_checks_mutations(root):
    cfg = yaml.safe_load((root / "config/config.yaml").read_text())
    cfg["variants"]["fx"] = {"parent": "wt", "mutations": ["A:L6E"]}
    with pytest.raises(ConfigError, match=r"variants\.fx\.mutations.*is ILE, not LEU"):
        check_config(cfg, root)
    cfg["variants"]["fx"] = {"parent": "wt", "mutations": ["A:I6E"]}
    check_config(cfg, root)
