"""Pigments from real and invented structures: inventory, QM models, hydrogens, bad inputs."""
import gzip
from collections import Counter

import numpy as np
import pytest

from siteshift.structures.inventory import take_inventory
from siteshift.structures.qmmodel import (ModelError, build_qm_model, ccd_graph, ccd_residue,
                                          close_contacts, formula, kabsch)
from siteshift.structures.reading import StructureError, read_structure


def _ccd_truncated_formula(code, ptype):
    """Formula expected from the CCD alone: CCD atoms on the core side of the library's cut bonds
    (hydrogens on kept heavy atoms), plus one cap H per cut bond. Independent of the builder."""
    names, elements, _x, adj = ccd_graph(code)
    el = dict(zip(names, elements))
    cut = {frozenset(b) for b in ptype.cut_bonds}
    keep, stack = {ptype.core[0]}, [ptype.core[0]]
    while stack:
        a = stack.pop()
        for b in adj[a]:
            if el[b] != "H" and b not in keep and frozenset((a, b)) not in cut:
                keep.add(b)
                stack.append(b)
    hs = [h for h in names if el[h] == "H" and any(n in keep for n in adj[h])]
    return formula([el[n] for n in keep] + ["H"] * (len(hs) + len(ptype.cut_bonds)))


# --- PDB entry 19HC (nine-heme cytochrome c; REFERENCES.md "Open structures for tests") -------

@pytest.fixture(scope="module")
def hc19(hc19_path):
    return read_structure(hc19_path)


def test_19hc_altlocs(hc19_path, hc19):
    # 19HC: 6098 ATOM/HETATM records; each altloc residue has one disorder group (A/B), of
    # which the occupancy policy keeps one label.
    # Independent count from the raw file: records minus those of non-kept altloc labels.
    lines = [l for l in gzip.open(hc19_path, "rt") if l.startswith(("ATOM", "HETATM"))]
    assert len(lines) == 6098
    alt = Counter(l[16] for l in lines if l[16] != " ")
    assert set(alt) == {"A", "B"}
    # every altloc residue of 19HC has A at occupancy >= B, so policy "occupancy" keeps A
    assert len(hc19) == 6098 - alt["B"] == 6021


def test_19hc_inventory(hc19, library):
    rows = take_inventory(hc19, library)
    hemes = [r for r in rows if r["ccd_code"] == "HEM"]
    assert len(hemes) == 18  # 19HC: 18 HEM, 9 per chain (RCSB entry description)
    assert {r["chain"] for r in hemes} == {"A", "B"}
    assert sum(r["chain"] == "A" for r in hemes) == 9
    assert len({r["pigment_id"] for r in hemes}) == 18
    expected = _ccd_truncated_formula("HEM", library["HEM"])
    assert expected == "C30H28FeN4"
    for r in hemes:
        assert r["status"] == "ok", r
        assert r["formula_qm"] == expected
        assert r["charge"] == 0 and r["multiplicity"] == 1


def test_19hc_models_sane_geometry(hc19, library):
    from siteshift.structures.inventory import model_for, pigment_residues
    pigs, _ = pigment_residues(hc19, library)
    for res in pigs[:4]:
        m = model_for(res, library)
        assert not close_contacts(m, 0.9), res.id
        # each H sits 0.95–1.12 Å from its nearest heavy atom (CCD / cap bond lengths)
        x = m.coords
        heavy = x[[e != "H" for e in m.elements]]
        for e, xi in zip(m.elements, x):
            if e == "H":
                assert 0.95 < np.linalg.norm(heavy - xi, axis=1).min() < 1.12


def test_mmcif_and_pdb_give_same_inventory(tmp_path, hc19_path, library):
    gemmi = pytest.importorskip("gemmi")
    st = gemmi.read_structure(str(hc19_path))
    st.setup_entities()
    cif = tmp_path / "19hc.cif"
    st.make_mmcif_document().write_file(str(cif))
    a = take_inventory(read_structure(hc19_path), library)
    b = take_inventory(read_structure(cif), library)
    key = lambda rows: [(r["pigment_id"], r["formula_qm"], r["n_atoms_read"]) for r in rows
                        if r["status"] == "ok"]
    assert key(a) == key(b)


# --- CCD ideal coordinates: hydrogens rebuilt ---------------------------------------------

def _random_pose(x, seed):
    rng = np.random.default_rng(seed)
    q, _ = np.linalg.qr(rng.normal(size=(3, 3)))
    if np.linalg.det(q) < 0:
        q[:, 0] *= -1
    return x @ q.T + rng.normal(size=3) * 10, q


@pytest.mark.parametrize("code", ["BCL", "CLA", "HEM", "FMN", "RET"])
def test_ccd_hydrogens_come_back(code, library):
    # wwPDB CCD (biotite's offline copy): strip H, move rigidly, rebuild; every CCD-derived H
    # must land within 0.2 Å of the CCD position (moved the same way), formula as the CCD gives.
    arr = ccd_residue(code)
    heavy = arr[arr.element != "H"]
    moved, q = _random_pose(np.asarray(heavy.coord, float), seed=len(code))
    m = build_qm_model(f"X_{code}1", code, heavy.atom_name, heavy.element, moved, library[code])
    assert m.formula == _ccd_truncated_formula(code, library[code])
    ref = {str(n): c for n, c in zip(arr.atom_name, arr.coord)}
    R, t = kabsch(np.asarray(heavy.coord, float), moved)
    for n, x, o in zip(m.names, m.coords, m.origin):
        if o == "ccd_h":
            assert np.linalg.norm(x - (ref[n] @ R + t)) < 0.2
    assert not close_contacts(m, 0.9)


def test_bcl_model_size(library):
    # BCL with the phytyl cut to a methyl: 85 atoms (C36H38MgN4O6), as used in the speed issue
    arr = ccd_residue("BCL")
    heavy = arr[arr.element != "H"]
    m = build_qm_model("A_BCL1", "BCL", heavy.atom_name, heavy.element, heavy.coord,
                       library["BCL"])
    assert len(m.elements) == 85 and m.formula == "C36H38MgN4O6"


def test_perturbed_heavy_atoms_still_place_h_close(library):
    arr = ccd_residue("CLA")
    heavy = arr[arr.element != "H"]
    rng = np.random.default_rng(1)
    x = np.asarray(heavy.coord, float) + rng.normal(scale=0.03, size=(len(heavy), 3))
    m = build_qm_model("A_CLA1", "CLA", heavy.atom_name, heavy.element, x, library["CLA"])
    ref = {str(n): c for n, c in zip(arr.atom_name, arr.coord)}
    dev = [np.linalg.norm(xx - ref[n]) for n, xx, o in zip(m.names, m.coords, m.origin)
           if o == "ccd_h"]
    # 0.05 Å (rms per atom) noise on the heavy atoms moves a methyl H by a few tenths through the
    # torsion lever arm; hold the worst to 0.3 Å and the typical one to 0.1 Å
    assert max(dev) < 0.3 and float(np.median(dev)) < 0.1


# --- bad inputs ---------------------------------------------------------------------------

def test_missing_core_atom_is_named(library):
    arr = ccd_residue("BCL")
    heavy = arr[(arr.element != "H") & (arr.atom_name != "NB")]
    with pytest.raises(ModelError, match=r"A_BCL7.*NB"):
        build_qm_model("A_BCL7", "BCL", heavy.atom_name, heavy.element, heavy.coord,
                       library["BCL"])


def test_impossible_charge_spin(library):
    arr = ccd_residue("HC4")
    heavy = arr[arr.element != "H"]
    with pytest.raises(ModelError, match="impossible"):
        build_qm_model("A_HC41", "HC4", heavy.atom_name, heavy.element, heavy.coord,
                       library["HC4"], charge=0, multiplicity=2)


def test_unknown_ligand_is_listed_unsupported(tmp_path, library):
    arr = ccd_residue("HC4")
    lines = []
    for k, (n, e, x) in enumerate(zip(arr.atom_name, arr.element, arr.coord), 1):
        lines.append(f"HETATM{k:5d} {n:<4s} XYZ A 501    {x[0]:8.3f}{x[1]:8.3f}{x[2]:8.3f}"
                     f"  1.00  0.00          {e:>2s}")
    p = tmp_path / "lig.pdb"
    p.write_text("\n".join(lines) + "\nEND\n")
    rows = take_inventory(read_structure(p), library)
    assert [r["status"] for r in rows] == ["unsupported"]
    assert "not in the pigment library" in rows[0]["problems"]


def test_empty_and_non_structure_files(tmp_path):
    empty = tmp_path / "empty.pdb"
    empty.write_text("END\n")
    with pytest.raises(StructureError, match="empty.pdb"):
        read_structure(empty)
    junk = tmp_path / "notes.txt"
    junk.write_text("hello")
    with pytest.raises(StructureError, match="unknown structure format"):
        read_structure(junk)
    with pytest.raises(StructureError, match="does not exist"):
        read_structure(tmp_path / "nope.pdb")


def test_models_do_not_depend_on_string_hashing(root):
    # Identical inputs must give bit-identical QM models in every process (the QM cache keys on
    # them); Python randomises string hashing per process, so run under two seeds.
    import os
    import subprocess
    import sys
    code = ("import sys; sys.path.insert(0, 'scripts');"
            "from siteshift.structures.reading import read_structure;"
            "from siteshift.structures.library import load_library;"
            "from siteshift.study.stages import find_pigment;"
            "from siteshift.structures.inventory import model_for;"
            "lib = load_library(); a = read_structure('config/demo/pcd2_wt.pdb');"
            "print(model_for(find_pigment(a, lib, 'B_HC4101'), lib).coords.round(6).tolist())")
    outs = {subprocess.run([sys.executable, "-c", code], cwd=root, capture_output=True, text=True,
                           env={**os.environ, "PYTHONHASHSEED": s}, check=True).stdout
            for s in ("1", "2", "3")}
    assert len(outs) == 1


def test_19hc_bis_his_ligands_in_every_cluster(hc19_path, tmp_path, library):
    # 19HC hemes are bis-His ligated: each cluster must hold two His whose NE2 (or ND1) lies
    # within 2.6 Å of the iron (coordination bond ≈ 2.0 Å; RCSB entry, common practice).
    import MDAnalysis as mda
    from siteshift.structures.inventory import pigment_residues
    from siteshift.study.stages import extract_stage
    atoms = read_structure(hc19_path)
    pigs, _ = pigment_residues(atoms, library)
    for res in pigs:
        d = tmp_path / res.id
        extract_stage(hc19_path, res.id, d / "m.xyz", d / "m.json", d / "c.pdb", library=library)
        u = mda.Universe(str(d / "c.pdb"))
        fe = u.select_atoms("name FE and prop tempfactor > 0.5")  # the flagged pigment
        lig = u.select_atoms("resname HIS and name NE2 ND1 and around 2.6 group fe", fe=fe)
        assert len(lig.residues) == 2, res.id
        assert (u.atoms.tempfactors == 1.0).sum() == len(res.atoms)


def test_axial_his_ligands_join_the_qm_model(hc19_path, library, tmp_path):
    # 19HC bis-His hemes: with axial ligands on, each QM model gains two 4-methylimidazoles
    # (His side chains cut at CA–CB; the coordinating Nε loses its proton): C30H28FeN4 +
    # 2 × C4H6N2 = C38H40FeN8 (formula from the CCD HIS entry); bis-His ligation takes the
    # library's ligation state, Fe(III) low spin: charge +1, doublet (349 electrons). A pigment
    # override (here the reduced Fe(II) singlet) wins over the ligation state.
    from siteshift.study.stages import extract_stage
    rec = extract_stage(hc19_path, "B_HEM305", tmp_path / "m.xyz", tmp_path / "m.json",
                        tmp_path / "c.pdb", library=library, axial_ligands=True)
    assert rec["formula"] == "C38H40FeN8"
    assert (rec["charge"], rec["multiplicity"]) == (1, 2)
    assert sum("axial ligand" in p for p in rec["problems"]) == 2
    assert any(p.startswith("ligation HIS+HIS") for p in rec["problems"])
    red = extract_stage(hc19_path, "B_HEM305", tmp_path / "r.xyz", tmp_path / "r.json",
                        tmp_path / "r.pdb", library=library,
                        overrides={"B_HEM305": {"charge": 0, "multiplicity": 1}})
    assert (red["charge"], red["multiplicity"]) == (0, 1)
    x = np.array(rec["coords_A"])
    d = np.linalg.norm(x[:, None] - x[None], axis=-1) + np.eye(len(x)) * 10
    assert d.min() > 0.9


def test_19hc_every_heme_gets_its_two_his_by_default(hc19, library):
    # 19HC is a bis-His c-type cytochrome (REFERENCES.md): with the default settings every one of
    # the 18 hemes has exactly two His Nε2 donors within 2.6 Å of Fe (1.9–2.1 Å) and both side
    # chains enter the QM model (C38H40FeN8) in the library's bis-His state, Fe(III) low spin
    # (charge +1, doublet; config/pigments.yaml ligation_states, sourced there).
    from siteshift.base.defaults import default
    from siteshift.structures.inventory import model_for, pigment_residues
    from siteshift.structures.ligands import add_axial_ligands
    assert default("extract.axial_ligands") is True
    pigs, _ = pigment_residues(hc19, library)
    hemes = [p for p in pigs if p.code == "HEM"]
    assert len(hemes) == 18
    for res in hemes:
        env = hc19[~np.isin(hc19.indices, res.atoms.indices)]
        m = add_axial_ligands(model_for(res, library), library["HEM"], env)
        assert [(d["atom"], d["kind"], d["in_qm"]) for d in m.ligands] == \
            [("NE2", "side chain", True)] * 2, res.id
        assert all(1.85 < d["distance_A"] < 2.15 for d in m.ligands)
        assert m.formula == "C38H40FeN8" and (m.charge, m.multiplicity) == (1, 2)
    rows = take_inventory(hc19, library)
    hem = [r for r in rows if r["ccd_code"] == "HEM"]
    assert all(r["metal_donors"].count("HIS") == 2 for r in hem)
    assert all("HIS+HIS" in r["problems"] and "multiplicity 2" in r["problems"] for r in hem)


def test_metal_donors_outside_the_qm_model_are_flagged(hc19, library, tmp_path):
    # A donor at bonding distance of the metal that stays outside the QM model acts as point
    # charges ~2 Å from it: the inventory lists it (donors_outside_qm, problems) and the study
    # summary turns it into a warning. 19HC's His donors join the QM model by default (none
    # flagged); with extract.axial_ligands off all 36 are flagged, 2 per heme.
    from types import SimpleNamespace

    import pandas as pd

    from siteshift.structures.inventory import INVENTORY_COLUMNS, outside_donors
    from siteshift.study.summary import summary_rows
    on = [r for r in take_inventory(hc19, library) if r["ccd_code"] == "HEM"]
    assert all(r["donors_outside_qm"] == "" for r in on)
    off = [r for r in take_inventory(hc19, library, axial_ligands=False)
           if r["ccd_code"] == "HEM"]
    assert all(r["donors_outside_qm"].count("HIS") == 2 for r in off)
    assert all("stay outside the QM model" in r["problems"] for r in off)
    # a backbone carbonyl on a Mg (as a Leu C=O on a bacteriochlorophyll): no fragment rule,
    # flagged whatever extract.axial_ligands says; a His Nε2 joins the model
    leu = {"residue": "L:LEU153", "atom": "O", "distance_A": 2.05, "kind": "backbone O",
           "_atom": SimpleNamespace(resname="LEU")}
    his = {"residue": "L:HIS173", "atom": "NE2", "distance_A": 2.1, "kind": "side chain",
           "_atom": SimpleNamespace(resname="HIS")}
    assert outside_donors([leu, his], library["BCL"]) == [leu]
    assert outside_donors([leu, his], library["BCL"], axial_ligands=False) == [leu, his]
    inv = tmp_path / "inventory.tsv"
    pd.DataFrame(off, columns=INVENTORY_COLUMNS).to_csv(inv, sep="\t", index=False)
    rows = summary_rows({"v": inv}, [])
    assert len(rows) == 18
    assert rows.reason.str.startswith("warning: ").all()
