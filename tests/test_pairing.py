"""Automatic branch pairing by chain superposition."""

from siteshift.structures.pairing import auto_pairs_by_superposition, superpose_chains
from siteshift.structures.reading import read_structure


def test_demo_pockets_pair_up(root, library):
    # the invented dimer's chains are two-fold copies: Cα RMSD ≈ 0.1 Å (PeptideBuilder backbones
    # of different sequences), the pigment lands on its partner
    rows = auto_pairs_by_superposition(read_structure(root / "config/demo/pcd2_wt.pdb"), library)
    assert [(r["pigment_a"], r["pigment_b"]) for r in rows] == [("A_HC4101", "B_HC4101")]
    assert rows[0]["rmsd_A"] < 0.2 and rows[0]["distance_A"] < 0.5


def test_19hc_chains_pair_hemes_by_number(hc19_path, library):
    # PDB 19HC: two copies of the same nine-heme chain in the asymmetric unit; each heme of
    # chain A must pair with the same-numbered heme of chain B
    atoms = read_structure(hc19_path)
    R, t, rmsd, n = superpose_chains(atoms, "A", "B")
    assert n > 250 and rmsd < 1.0
    rows = auto_pairs_by_superposition(atoms, library)
    assert len(rows) == 9
    assert all(r["pigment_a"].split("_")[1] == r["pigment_b"].split("_")[1] for r in rows)
    assert max(r["distance_A"] for r in rows) < 1.0
