"""Real-structure chemistry: altlocs per disorder group, the pigment's conformer leading its
neighbours', clashes, pigments missing atoms (rebuilt from the CCD or flagged partial),
the donors around a pigment's metal, chromophores covalently linked to the protein, and pigments
at an interface with an assembly copy the file lacks.

The test structures are built here from the wwPDB Chemical Component Dictionary's ideal
coordinates of bacteriochlorophyll a (CCD code BCL, offline copy shipped with biotite) and from
PDB entry 19HC (REFERENCES.md, "Open structures for tests")."""
import numpy as np
import pytest

from siteshift.structures.inventory import take_inventory
from siteshift.structures.qmmodel import ccd_graph
from siteshift.structures.reading import read_structure

RING_B = ["NB", "C1B", "C2B", "C3B", "C4B", "CMB", "CAB", "OBB", "CBB"]
RING_D = ["ND", "C1D", "C2D", "C3D", "C4D", "CMD"]


def _line(serial, name, alt, resn, chain, resid, xyz, occ, el, rec="HETATM"):
    nm = name if len(name) == 4 else f" {name:<3s}"
    return (f"{rec:<6s}{serial:>5d} {nm}{alt:1s}{resn:>3s} {chain:1s}{resid:>4d}    "
            f"{xyz[0]:8.3f}{xyz[1]:8.3f}{xyz[2]:8.3f}{occ:6.2f}{20.0:6.2f}          {el:>2s}")


def _bcl():
    names, elements, x, _adj = ccd_graph("BCL")
    heavy = [i for i, e in enumerate(elements) if e != "H"]
    return [names[i] for i in heavy], [elements[i] for i in heavy], x[heavy]


def _normal(names, x):
    ring = x[[names.index(n) for n in ("NA", "NB", "NC", "ND")]]
    _u, _s, vt = np.linalg.svd(ring - ring.mean(0))
    return vt[2]


def _write(path, lines):
    path.write_text("\n".join(lines) + "\nEND\n")
    return path


def _two_group_structure(tmp_path):
    """BCL A301 with ring B in altlocs A (0.6) / B (0.4) and ring D in C (0.3) / D (0.7); the
    other atoms without altloc. Neighbours: waters present only in state B, only in A, only in
    C; a Leu whose side chain is in A (0.3) and B (0.7)."""
    names, els, x = _bcl()
    z = _normal(names, x)
    lines, k = [], 0
    for n, e, xi in zip(names, els, x):
        k += 1
        if n in RING_B:
            lines.append(_line(k, n, "A", "BCL", "A", 301, xi, 0.6, e))
            k += 1
            lines.append(_line(k, n, "B", "BCL", "A", 301, xi + 0.3 * z, 0.4, e))
        elif n in RING_D:
            lines.append(_line(k, n, "C", "BCL", "A", 301, xi + 0.3 * z, 0.3, e))
            k += 1
            lines.append(_line(k, n, "D", "BCL", "A", 301, xi, 0.7, e))
        else:
            lines.append(_line(k, n, " ", "BCL", "A", 301, xi, 1.0, e))
    mg = x[names.index("MG")]
    waters = {401: ("B", mg + 3.4 * z), 402: ("A", mg - 3.4 * z),
              403: ("C", x[names.index("C2D")] + 3.4 * z)}
    for resid, (alt, pos) in waters.items():
        k += 1
        lines.append(_line(k, "O", alt, "HOH", "A", resid, pos, 0.5, "O"))
    base = x[names.index("C2B")] - 3.8 * z
    for alt, occ, shift in (("A", 0.3, 0.0), ("B", 0.7, 1.2)):
        for j, n in enumerate(("CB", "CG", "CD1", "CD2")):
            k += 1
            lines.append(_line(k, n, alt, "LEU", "A", 50, base - (j * 1.5 + shift) * z +
                               np.array([0.0, 1.0 * j, 0.0]), occ, "C", rec="ATOM"))
    return _write(tmp_path / "two_groups.pdb", lines), names, x


def test_independent_altloc_groups_keep_every_atom(tmp_path, library):
    # CCD BCL ideal coordinates, two independent disorder groups on one residue: every heavy atom
    # of the CCD is kept, each group in its best-occupied state (A for ring B, D for ring D), at
    # the ideal (unshifted) positions. A per-residue altloc choice keeps one letter (A: summed
    # occupancy 9 × 0.6 = 5.4 against D's 6 × 0.7 = 4.2) and loses the other ring's core atoms.
    path, names, x = _two_group_structure(tmp_path)
    chosen = {}
    atoms = read_structure(path, report=chosen)
    bcl = atoms[atoms.resnames == "BCL"]
    assert sorted(bcl.names) == sorted(names)            # all 66 heavy atoms, none twice
    pos = {a.name: a.position for a in bcl}
    for n in RING_B + RING_D:
        assert np.allclose(pos[n], x[names.index(n)], atol=1e-3), n
    assert chosen["A_BCL301"]["altlocs"] == "A+D"
    rows = take_inventory(atoms, library, altlocs=chosen)
    row = next(r for r in rows if r["pigment_id"] == "A_BCL301")
    assert row["status"] == "ok", row["problems"]
    assert row["altlocs"] == "A+D" and row["rebuilt_atoms"] == ""
    # the old per-residue rule would have kept one letter only: check that it really loses atoms
    import MDAnalysis as mda
    u = mda.Universe(str(path))
    letters = set(u.atoms.altLocs) - {""}
    assert all(len(u.atoms[(u.atoms.altLocs == lab) | (u.atoms.altLocs == "")]
                   .select_atoms("resname BCL")) < len(names) for lab in letters)


def test_neighbours_follow_the_pigment_state(tmp_path):
    # The pigment took A (ring B) and D (ring D): the water present only in B and the one only
    # in C belong to states without the pigment's conformer and are dropped; the water only in
    # A stays; the Leu takes A although its B is better occupied (0.7 vs 0.3).
    path, _names, _x = _two_group_structure(tmp_path)
    chosen = {}
    atoms = read_structure(path, report=chosen)
    waters = {int(a.resid) for a in atoms if a.resname == "HOH"}
    assert waters == {402}
    leu = atoms[atoms.resnames == "LEU"]
    assert len(leu) == 4 and set(leu.altLocs) == {"A"}
    assert chosen["A_BCL301"]["rejected"] == "B+C"
    assert chosen["A_BCL301"]["dropped_atoms"] == 2
    # without a ligand leading, the Leu would take its better-occupied B (policy "occupancy")
    lines = [l for l in path.read_text().splitlines() if "LEU" in l]
    alone = read_structure(_write(tmp_path / "leu.pdb", lines))
    assert set(alone.altLocs) == {"B"}


def _single_state_structure(tmp_path, blank_water_at=None):
    """BCL A301 present only as altloc B (0.5); a water only in A next to it; optionally a
    blank-altloc water at `blank_water_at` (the other state's water, unlabelled)."""
    names, els, x = _bcl()
    z = _normal(names, x)
    lines = [_line(k + 1, n, "B", "BCL", "A", 301, xi, 0.5, e)
             for k, (n, e, xi) in enumerate(zip(names, els, x))]
    mg = x[names.index("MG")]
    lines.append(_line(900, "O", "A", "HOH", "A", 401, mg + 3.0 * z, 0.5, "O"))
    if blank_water_at is not None:
        lines.append(_line(901, "O", " ", "HOH", "A", 402, blank_water_at, 1.0, "O"))
    return _write(tmp_path / "single_state.pdb", lines), names, x, z


def test_pigment_in_one_state_drops_the_other_states_neighbours(tmp_path, library):
    path, _n, _x, _z = _single_state_structure(tmp_path)
    chosen = {}
    atoms = read_structure(path, report=chosen)
    assert not len(atoms[atoms.resnames == "HOH"])       # the A-only water is gone
    assert chosen["A_BCL301"] == {"altlocs": "B", "rejected": "", "followers": 1,
                                  "dropped_atoms": 1}
    row = take_inventory(atoms, library, altlocs=chosen)[0]
    assert row["status"] == "ok" and "1 neighbour atom(s)" in row["problems"]


def test_clash_is_an_error_by_default(tmp_path, library):
    # a blank-altloc water 0.25 Å from a macrocycle carbon (two states mixed: the brief's case):
    # error by default, naming the atoms and the distance; a noted problem with on_clash="warn"
    names, _els, x = _bcl()
    c = x[names.index("C2A")] + np.array([0.25, 0.0, 0.0])
    path, *_ = _single_state_structure(tmp_path, blank_water_at=c)
    chosen = {}
    atoms = read_structure(path, report=chosen)
    row = take_inventory(atoms, library, altlocs=chosen)[0]
    assert row["status"] == "error"
    assert "clash" in row["problems"] and "C2A-A:HOH402 O 0.25 A" in row["problems"]
    assert row["min_contact_A"] == pytest.approx(0.25, abs=0.01)
    warn = take_inventory(atoms, library, altlocs=chosen, on_clash="warn")[0]
    assert warn["status"] == "ok" and "clash" in warn["problems"]
    far = take_inventory(atoms, library, altlocs=chosen, clash_A=0.2)[0]
    assert far["status"] == "ok" and "clash" not in far["problems"]


def test_19hc_links_are_not_clashes(hc19, library):
    # 19HC: c-type hemes, thioether CAB/CAC–SG(Cys) 1.8 Å and His NE2–Fe 2.0 Å (bonds, exempt);
    # no heme has another heavy atom under 2.2 Å (a refined 1.8 Å structure)
    rows = [r for r in take_inventory(hc19, library) if r["ccd_code"] == "HEM"]
    assert len(rows) == 18 and all(r["status"] == "ok" for r in rows)
    assert all(1.7 < r["min_contact_A"] < 2.0 for r in rows)   # the thioether S–C bonds


@pytest.fixture(scope="module")
def hc19(hc19_path):
    return read_structure(hc19_path)


def test_missing_tail_atom_rebuilt_from_ccd(hc19, library):
    # 19HC A_HEM301 without its ring-B methyl carbon CMB: rebuilt from the CCD ideal geometry
    # superposed on its bonded neighbours, within 0.3 Å of the deposited position (CCD ideal vs
    # refined geometry), and the formula of its 17 siblings kept (C30H28FeN4, as
    # test_structures' CCD-only count); with rebuild_missing=False it is "partial", not computed.
    sel = (hc19.resnames == "HEM") & (hc19.resids == 301) & (hc19.chainIDs == "A")
    true = hc19[sel & (hc19.names == "CMB")].positions[0]
    cut = hc19[~(sel & (hc19.names == "CMB"))]
    rows = take_inventory(cut, library)
    row = next(r for r in rows if r["pigment_id"] == "A_HEM301")
    assert row["status"] == "ok" and row["rebuilt_atoms"] == "CMB"
    assert row["formula_qm"] == "C30H28FeN4"
    assert "differs" not in row["problems"]
    from siteshift.structures.inventory import model_for, pigment_residues
    res = next(r for r in pigment_residues(cut, library)[0] if r.id == "A_HEM301")
    m = model_for(res, library)
    assert m.origin[m.names.index("CMB")] == "rebuilt"
    assert np.linalg.norm(m.coords[m.names.index("CMB")] - true) < 0.3
    # CAA, the stem of a propionate cut away (CAA–CBA): placed from the ring, not from the
    # flexible tail still in the file (fitted with the tail it landed 1.5–2.4 Å off)
    sel_caa = sel & (hc19.names == "CAA")
    res2 = next(r for r in pigment_residues(hc19[~sel_caa], library)[0] if r.id == "A_HEM301")
    m2 = model_for(res2, library)
    assert m2.rebuilt == ["CAA"]
    assert np.linalg.norm(m2.coords[m2.names.index("CAA")] - hc19[sel_caa].positions[0]) < 0.3
    partial = next(r for r in take_inventory(cut, library, rebuild_missing=False)
                   if r["pigment_id"] == "A_HEM301")
    assert partial["status"] == "partial" and "['CMB']" in partial["problems"]



def test_water_ligand_enters_and_backbone_o_is_reported(tmp_path, library):
    # BCL (CCD ideal) with a water O 2.1 Å above Mg (a five-coordinate Mg; Mg–O(water) ~2.1 Å,
    # from memory) and a Gly backbone O 2.4 Å below: the water joins the QM model whole
    # (C36H38MgN4O6 + H2O, neutral, TIP3P H–O–H 104.52°), the backbone O is reported but not
    # added (no fragment rule), both listed in the record's metal_ligands, closest first.
    from siteshift.study.stages import extract_stage
    names, els, x = _bcl()
    z = _normal(names, x)
    mg = x[names.index("MG")]
    lines = [_line(k + 1, n, " ", "BCL", "A", 301, xi, 1.0, e)
             for k, (n, e, xi) in enumerate(zip(names, els, x))]
    lines.append(_line(900, "O", " ", "HOH", "A", 401, mg + 2.1 * z, 1.0, "O"))
    o = mg - 2.4 * z
    lines.append(_line(901, "C", " ", "GLY", "A", 60, o - 1.23 * z, 1.0, "C", rec="ATOM"))
    lines.append(_line(902, "O", " ", "GLY", "A", 60, o, 1.0, "O", rec="ATOM"))
    path = _write(tmp_path / "ligands.pdb", lines)
    rec = extract_stage(path, "A_BCL301", tmp_path / "m.xyz", tmp_path / "m.json",
                        tmp_path / "c.pdb", library=library)
    assert rec["formula"] == "C36H40MgN4O7" and rec["charge"] == 0
    lig = rec["metal_ligands"]
    assert [(d["residue"], d["kind"], d["in_qm"]) for d in lig] == \
        [("A:HOH401", "water", True), ("A:GLY60", "backbone O", False)]
    assert lig[0]["distance_A"] == pytest.approx(2.1, abs=1e-3)
    xs = np.array(rec["coords_A"])
    oh = [xs[rec["names"].index(f"A:HOH401:{h}")] for h in ("O", "H1", "H2")]
    v1, v2 = oh[1] - oh[0], oh[2] - oh[0]
    ang = np.degrees(np.arccos(v1 @ v2 / np.linalg.norm(v1) / np.linalg.norm(v2)))
    assert ang == pytest.approx(104.52, abs=0.01)
    assert np.linalg.norm(v1) == pytest.approx(0.9572, abs=1e-4)
    # hydrogens point away from the metal
    assert all(np.linalg.norm(h - mg) > 2.1 for h in oh[1:])
    off = extract_stage(path, "A_BCL301", tmp_path / "n.xyz", tmp_path / "n.json",
                        tmp_path / "d.pdb", library=library, axial_ligands=False)
    assert off["formula"] == "C36H38MgN4O6"
    assert [d["in_qm"] for d in off["metal_ligands"]] == [False, False]


def _ccd_heavy(code):
    names, elements, x, _adj = ccd_graph(code)
    heavy = [i for i, e in enumerate(elements) if e != "H"]
    return [names[i] for i in heavy], [elements[i] for i in heavy], x[heavy]


def _linked(tmp_path, code, atom, leaving, partner_code, chain3, bond, angle, with_partner=True):
    """`code` (CCD ideal, `leaving` atom removed) and a `partner_code` residue (CCD ideal,
    superposed on a zigzag chain3 = (partner atom, next, next-but-one) that starts `bond` Å from
    `atom` along the leaving atom's direction, trans to the pigment chain)."""
    from siteshift.structures.qmmodel import kabsch
    names, els, x = _ccd_heavy(code)
    c = x[names.index(atom)]
    u = x[names.index(leaving)] - c
    u /= np.linalg.norm(u)
    back = [n for n in _adj_of(code)[atom] if n in names and n != leaving][0]
    w = x[names.index(back)] - c
    w -= (w @ u) * u
    w /= np.linalg.norm(w)
    p0 = c + bond * u
    th = np.radians(angle)
    p1 = p0 + 1.5 * (np.cos(th) * -u - np.sin(th) * w)
    p2 = p1 + 1.52 * u
    lines = [_line(k + 1, n, " ", code, "A", 301, xi, 1.0, e)
             for k, (n, e, xi) in enumerate(zip(names, els, x)) if n != leaving]
    if with_partner:
        pn, pe, px = _ccd_heavy(partner_code)
        ref = [pn.index(a) for a in chain3]
        R, t = kabsch(px[ref], np.array([p0, p1, p2]))
        for k, (n, e, xi) in enumerate(zip(pn, pe, px @ R + t)):
            if n != "OXT":
                lines.append(_line(500 + k, n, " ", partner_code, "A", 216, xi, 1.0, e,
                                   rec="ATOM"))
    return _write(tmp_path / f"{code}_{partner_code}.pdb", lines)


def _adj_of(code):
    return ccd_graph(code)[3]


def test_retinal_lys_schiff_base_is_protonated(tmp_path, library):
    # Retinal bound to a Lys as the protonated Schiff base (common practice for rhodopsins): the
    # aldehyde O1 gives way to NZ (C15=NZ), the Lys enters as CE–NZ(H) cut at CD–CE: the
    # N-methyl retinylidene iminium C21H32N+ (CCD RET C20H28O − O + NH + CH3), charge +1, singlet.
    from siteshift.study.stages import extract_stage
    path = _linked(tmp_path, "RET", "C15", "O1", "LYS", ("NZ", "CE", "CD"), 1.30, 123.0)
    rec = extract_stage(path, "A_RET301", tmp_path / "m.xyz", tmp_path / "m.json",
                        tmp_path / "c.pdb", library=library)
    assert rec["formula"] == "C21H32N" and (rec["charge"], rec["multiplicity"]) == (1, 1)
    assert any(p.startswith("linked residue A:LYS216 (NZ-C15") for p in rec["problems"])
    x = np.array(rec["coords_A"])
    nz = x[rec["names"].index("A:LYS216:NZ")]
    hn = [i for i, n in enumerate(rec["names"]) if n == "A:LYS216:HNZ"]
    assert len(hn) == 1 and np.linalg.norm(x[hn[0]] - nz) == pytest.approx(1.01, abs=1e-6)
    assert "O1" not in rec["names"]
    # no two atoms closer than a bond to hydrogen
    d = np.linalg.norm(x[:, None] - x[None], axis=-1) + np.eye(len(x)) * 10
    assert d.min() > 0.9
    # the same retinal without its Lys (and without O1) is the free aldehyde, O1 rebuilt
    free = _linked(tmp_path, "RET", "C15", "O1", "LYS", ("NZ", "CE", "CD"), 1.30, 123.0,
                   with_partner=False)
    row = take_inventory(read_structure(free), library)[0]
    assert row["formula_qm"] == "C20H28O" and row["charge"] == 0
    assert row["rebuilt_atoms"] == "O1"


def test_thioester_chromophore_with_cys_is_a_phenolate(tmp_path, library):
    # p-coumaric acid as the thioester of a Cys with a deprotonated phenol (the photoactive-
    # yellow-protein chromophore): C1–SG replaces the hydroxyl O2, Cys enters as SG–CB cut at
    # CA–CB, HO4' leaves: S-methyl thioester phenolate C10H9O2S−, charge −1 (CCD HC4 C9H8O3
    # − OH − H + SCH3).
    path = _linked(tmp_path, "HC4", "C1", "O2", "CYS", ("SG", "CB", "CA"), 1.77, 100.0)
    atoms = read_structure(path)
    row = take_inventory(atoms, library)[0]
    assert row["status"] == "ok", row["problems"]
    assert row["formula_qm"] == "C10H9O2S" and row["charge"] == -1
    assert "thioester with Cys" in row["problems"]
    # the charge the QM model took from the Cys (0) is what the embedding charges remove
    from siteshift.environment.charges import _ligand_charges
    assert _ligand_charges({"problems": row["problems"].split("; ")}) == {"A:CYS216": 0}


def _sp2(center, toward, side, angle_deg, length):
    """A point `length` Å from `center` at `angle_deg` from the direction to `toward`, in the
    plane holding `side`, on side's side."""
    a = toward - center
    a /= np.linalg.norm(a)
    b = side - center
    b -= (b @ a) * a
    b /= np.linalg.norm(b)
    th = np.radians(angle_deg)
    return center + length * (np.cos(th) * a + np.sin(th) * b)


def test_in_chain_chromophore_is_cut_out_of_the_chain(tmp_path, library):
    # A GFP-type chromophore in a Ser-CRO-Val peptide (CRO from CCD ideal coordinates; the
    # neighbours' backbone in trans-peptide geometry, C–N 1.33 Å, C=O 1.23 Å, N–C–O 123°,
    # N–C–CA 116°, C–N–CA 122°; common practice): CRO is peptide-linking in the CCD, yet with its
    # library entry it is a pigment; its model is cut at N1-CA1, CB1-CA1 and CA3-C3 to HBDI
    # (4-hydroxybenzylidene-1,2-dimethylimidazolinone, C12H12N2O2, the usual QM model; common
    # practice); the peptide bonds to Ser C and Val N are bonds, not clashes. The anionic form
    # (a study entry dropping the phenol H) is C12H11N2O2-.
    n, e, x = _ccd_heavy("CRO")
    X = dict(zip(n, x))
    # the Ser's C at 122° from CA1 about N1, its O and CA on either side in the peptide plane;
    # of the choices (every 10° about the N1–CA1 axis), the one farthest from the CRO atoms
    rest = np.array([xi for a, xi in zip(n, x) if a != "N1"])
    a = (X["CA1"] - X["N1"]) / np.linalg.norm(X["CA1"] - X["N1"])
    b1 = np.cross(a, [0.0, 0.0, 1.0])
    b1 /= np.linalg.norm(b1)
    b2 = np.cross(a, b1)
    th = np.radians(122.0)
    options = []
    for phi in np.radians(np.arange(0, 360, 10)):
        c_ser = X["N1"] + 1.33 * (np.cos(th) * a + np.sin(th) * (np.cos(phi) * b1 +
                                                                  np.sin(phi) * b2))
        for side in (X["CA1"], 2 * c_ser - X["CA1"]):
            o_ser = _sp2(c_ser, X["N1"], side, 123.0, 1.23)
            ser = {"C": c_ser, "O": o_ser,
                   "CA": _sp2(c_ser, X["N1"], 2 * c_ser - o_ser, 116.0, 1.52)}
            options.append((min(np.linalg.norm(rest - p, axis=1).min() for p in ser.values()),
                            ser))
    ser = max(options, key=lambda o: o[0])[1]
    n_val = _sp2(X["C3"], X["CA3"], X["OXT"], 116.0, 1.33)
    val = {"N": n_val, "CA": _sp2(n_val, X["C3"], 2 * n_val - X["CA3"], 122.0, 1.46)}
    lines = [_line(100 + k, a, " ", "SER", "A", 64, p, 1.0, a[0], rec="ATOM")
             for k, (a, p) in enumerate(ser.items())]
    lines += [_line(200 + k, a, " ", "CRO", "A", 66, xi, 1.0, el)
              for k, (a, el, xi) in enumerate(zip(n, e, x)) if a != "OXT"]
    lines += [_line(300 + k, a, " ", "VAL", "A", 68, p, 1.0, a[0], rec="ATOM")
              for k, (a, p) in enumerate(val.items())]
    atoms = read_structure(_write(tmp_path / "gfp.pdb", lines))
    row = next(r for r in take_inventory(atoms, library) if r["ccd_code"] == "CRO")
    assert row["status"] == "ok", row["problems"]
    # the library's default is the anionic phenolate (the B form most FP structures hold)
    assert row["formula_qm"] == "C12H11N2O2" and row["charge"] == -1
    assert "clash" not in row["problems"]
    assert row["min_contact_A"] == pytest.approx(1.33, abs=0.01)
    from siteshift.structures.library import load_library
    neutral = load_library(extra={"CRO": {"charge": 0, "drop_h": []}})
    row = next(r for r in take_inventory(atoms, neutral) if r["ccd_code"] == "CRO")
    assert row["formula_qm"] == "C12H12N2O2" and row["charge"] == 0


def test_residue_classes_come_from_the_ccd(library):
    # CCD chemical-component types (biotite's offline CCD): modified amino acids (MSE
    # selenomethionine, SEP phosphoserine, FME formyl-Met) are peptide-linking → protein; a
    # library chromophore that is peptide-linking (CRO) stays a pigment; DNA nucleotides and
    # unknown codes are not protein.
    from siteshift.structures.reading import ccd_link_type, classify
    assert ccd_link_type("SEP") == "L-PEPTIDE LINKING"
    assert [classify(c, library) for c in ("MSE", "SEP", "FME", "CRO", "DA", "HOH", "GOL")] \
        == ["protein", "protein", "protein", "pigment", "unsupported", "water", "additive"]


def _biomt(k, rows):
    return [f"REMARK 350   BIOMT{i + 1} {k:>3d} {r[0]:9.6f} {r[1]:9.6f} {r[2]:9.6f} "
            f"{r[3]:14.5f}" for i, r in enumerate(rows)]


def test_pigment_at_a_missing_assembly_interface_is_flagged(tmp_path, library):
    # A homodimer deposited as one protomer: REMARK 350 (PDB format, read by gemmi) makes the
    # unit with a two-fold about z. HC4 A101 (CCD ideal) sits 3 Å off the axis, so the copy's HC4
    # is within 6 Å: flagged with the operator; HC4 A102, 30 Å off the axis, is not. 19HC's
    # assembly 1 is the file's own two chains (identity): nothing flagged.
    from siteshift.structures.inventory import flag_interfaces
    n, e, x = _ccd_heavy("HC4")
    x = x - x.mean(0)
    lines = ["REMARK 350 BIOMOLECULE: 1", "REMARK 350 APPLY THE FOLLOWING TO CHAINS: A"]
    lines += _biomt(1, [(1, 0, 0, 0), (0, 1, 0, 0), (0, 0, 1, 0)])
    lines += _biomt(2, [(-1, 0, 0, 0), (0, -1, 0, 0), (0, 0, 1, 0)])
    for resid, shift in ((101, 3.0), (102, 30.0)):
        lines += [_line(resid * 10 + k, a, " ", "HC4", "A", resid, xi + [shift, 0, 0], 1.0, el)
                  for k, (a, el, xi) in enumerate(zip(n, e, x))]
    path = _write(tmp_path / "protomer.pdb", lines)
    atoms = read_structure(path)
    rows = take_inventory(atoms, library)
    assert flag_interfaces(rows, atoms, library, path, 6.0) == 1
    near, far = rows
    assert "assembly 1 operator 2" in near["problems"] and "chain(s) A" in near["problems"]
    assert near["assembly_interface"].startswith("assembly 1 op 2: ")
    assert far["assembly_interface"] == "" and "interface" not in far["problems"]
    assert flag_interfaces(rows, atoms, library, path, 0.0) == 0


def test_19hc_assembly_is_the_file(hc19, hc19_path, library):
    from siteshift.structures.inventory import flag_interfaces
    rows = take_inventory(hc19, library)
    assert flag_interfaces(rows, hc19, library, hc19_path, 6.0) == 0
    assert all(r["assembly_interface"] == "" for r in rows)
