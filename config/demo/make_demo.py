#!/usr/bin/env python
"""Build the invented demo structures of siteshift (deterministic; rerun to regenerate).

Scenario (invented for the demo): "PCD-2", a designed parallel two-helix peptide dimer that binds
two copies of 4'-hydroxycinnamic acid (CCD code HC4, the p-coumaric acid chromophore) on the outer
faces of its helices, one pocket per chain, related by a two-fold axis. Chain A's pocket is lined
by apolar side chains (Leu/Ile/Phe/Val), chain B's by polar ones (Ser/Asn/Gln/Thr/Glu/Lys) and
three waters; the backbones are identical, so the two sites are pseudo-symmetric. The mutant
replaces the apolar pocket residue of chain A nearest the pigment by glutamate.

Geometry: ideal α-helices (φ = −57°, ψ = −47°) with side chains built by PeptideBuilder (Tien et
al., PeerJ 1, e80 (2013)); the pigment is placed from CCD ideal coordinates (heavy atoms) by a
seeded search over rigid orientations that maximises pocket contacts with no heavy-atom pair closer
than 3.3 Å in any variant.

Usage:  python config/demo/make_demo.py [OUTDIR]      (default: config/demo)
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

HELIX_LEN = 18
PHI, PSI = -57.0, -47.0
AXIS_OFFSET = 5.2          # Å, helix axis distance from the dimer's two-fold axis
MIN_HEAVY_DIST = 3.3       # Å, no closer heavy-atom contacts between pigment and anything else
APOLAR = ["L", "I", "F", "V", "L", "I", "F"]
POLAR = ["S", "N", "Q", "T", "E", "K", "S"]
MUTANT_CHAIN, MUTANT_RESIDUE = "A", "E"   # the mutant puts a Glu at the pocket-A residue
# whose side chain comes closest to pigment A without a clash
THREE = {"A": "ALA", "R": "ARG", "N": "ASN", "D": "ASP", "C": "CYS", "Q": "GLN", "E": "GLU",
         "G": "GLY", "H": "HIS", "I": "ILE", "L": "LEU", "K": "LYS", "M": "MET", "F": "PHE",
         "P": "PRO", "S": "SER", "T": "THR", "W": "TRP", "Y": "TYR", "V": "VAL"}


def build_helix(seq):
    """Atoms of an ideal helix as [(resnum, resname, atom, element, xyz)], axis along z."""
    import PeptideBuilder as PB
    s = PB.make_structure(seq, [PHI] * (len(seq) - 1), [PSI] * (len(seq) - 1))
    PB.add_terminal_OXT(s)
    atoms = []
    for res in s.get_residues():
        for a in res:
            atoms.append([res.get_id()[1], res.get_resname(), a.get_id(), a.element,
                          np.array(a.coord, float)])
    ca = np.array([a[4] for a in atoms if a[2] == "CA"])
    c = ca.mean(0)
    axis = np.linalg.svd(ca - c)[2][0]
    if axis @ (ca[-1] - ca[0]) < 0:
        axis = -axis
    # rotation taking the helix axis to z
    z = np.array([0.0, 0.0, 1.0])
    v = np.cross(axis, z)
    s_, c_ = np.linalg.norm(v), axis @ z
    vx = np.array([[0, -v[2], v[1]], [v[2], 0, -v[0]], [-v[1], v[0], 0]])
    R = np.eye(3) + vx + vx @ vx * ((1 - c_) / s_ ** 2) if s_ > 1e-9 else np.eye(3)
    for a in atoms:
        a[4] = R @ (a[4] - c)
    return atoms


def facing(atoms, direction):
    """Residue numbers whose CA→CB vector points along `direction` (cos > 0.5)."""
    out = []
    for r in sorted({a[0] for a in atoms}):
        ca = [a[4] for a in atoms if a[0] == r and a[2] == "CA"][0]
        cb = [a[4] for a in atoms if a[0] == r and a[2] == "CB"]
        if cb:
            v = (cb[0] - ca) / np.linalg.norm(cb[0] - ca)
            v[2] = 0
            if np.linalg.norm(v) and (v / np.linalg.norm(v)) @ direction > 0.0:
                out.append(r)
    return out


def sequences():
    """Sequences of chains A and B (and the mutant's A) designed on the helix geometry."""
    probe = build_helix("A" * HELIX_LEN)
    # chain A sits at +x; its outer face (+x) holds the pocket, its inner face (−x) the interface
    outer = [r for r in facing(probe, np.array([1.0, 0, 0])) if 3 <= r <= HELIX_LEN - 2]
    inner = facing(probe, np.array([-1.0, 0, 0]))
    base = list("AEEAKKAAEEAKKAAEEK"[:HELIX_LEN])
    for r in inner:
        base[r - 1] = "L"
    seq_a, seq_b = base[:], base[:]
    for k, r in enumerate(outer):
        seq_a[r - 1] = APOLAR[k % len(APOLAR)]
        seq_b[r - 1] = POLAR[k % len(POLAR)]
    return "".join(seq_a), "".join(seq_b), outer


def place_chain(atoms, chain, sign):
    """Chain A at x = +offset; chain B its image under the two-fold axis z."""
    out = []
    for r, rn, name, el, x in atoms:
        x = x + np.array([AXIS_OFFSET, 0.0, 0.0])
        if sign < 0:
            x = np.array([-x[0], -x[1], x[2]])
        out.append((chain, r, rn, name, el, x))
    return out


def c2(x):
    return np.array([-x[..., 0], -x[..., 1], x[..., 2]]).T if x.ndim == 2 else \
        np.array([-x[0], -x[1], x[2]])


def random_rotations(n, rng):
    q = rng.normal(size=(n, 4))
    q /= np.linalg.norm(q, axis=1)[:, None]
    w, x, y, z = q.T
    return np.stack([
        np.stack([1 - 2 * (y * y + z * z), 2 * (x * y - z * w), 2 * (x * z + y * w)], -1),
        np.stack([2 * (x * y + z * w), 1 - 2 * (x * x + z * z), 2 * (y * z - x * w)], -1),
        np.stack([2 * (x * z - y * w), 2 * (y * z + x * w), 1 - 2 * (x * x + y * y)], -1)], 1)


def place_pigment(protein_variants, pocket_a_atoms, pocket_b_atoms, seed=2026):
    """Seeded search for the pigment pose in pocket A (pocket B is its two-fold image)."""
    import biotite.structure.info as info
    from scipy.spatial import cKDTree
    hc4 = info.residue("HC4")
    heavy = hc4[hc4.element != "H"]
    names = [str(n) for n in heavy.atom_name]
    X0 = np.asarray(heavy.coord, float)
    X0 -= X0.mean(0)
    rng = np.random.default_rng(seed)
    rots = random_rotations(600, rng)
    trees = [cKDTree(p) for p in protein_variants]
    pa, pb = cKDTree(pocket_a_atoms), cKDTree(pocket_b_atoms)
    best = (-1, None)
    for R in rots:
        X = X0 @ R.T
        for d in np.arange(AXIS_OFFSET + 5.0, AXIS_OFFSET + 10.01, 0.5):
            for zoff in np.arange(-4.0, 4.01, 1.0):
                XA = X + np.array([d, 0.0, zoff])
                XB = c2(XA)
                ok = all(t.query(XA)[0].min() >= MIN_HEAVY_DIST and
                         t.query(XB)[0].min() >= MIN_HEAVY_DIST for t in trees)
                if not ok or np.linalg.norm(XA.mean(0) - XB.mean(0)) < 8:
                    continue
                score = min(sum(len(v) for v in pa.query_ball_point(XA, 5.0)),
                            sum(len(v) for v in pb.query_ball_point(XB, 5.0)))
                if score > best[0]:
                    best = (score, XA)
    if best[1] is None:
        raise RuntimeError("no clash-free pigment pose found")
    return names, [str(e) for e in heavy.element], best[1], best[0]


def place_waters(protein, pigment_b, polar_atoms, n=3):
    """Up to n waters 2.8 Å from polar pocket-B atoms, clash-free, nearest the pigment first."""
    from scipy.spatial import cKDTree
    allx = np.vstack([protein, pigment_b])
    tree = cKDTree(allx)
    dirs = np.array([[np.cos(t) * np.sin(p), np.sin(t) * np.sin(p), np.cos(p)]
                     for p in np.linspace(0.2, np.pi - 0.2, 9) for t in np.linspace(0, 2 * np.pi,
                                                                                   16, False)])
    cands = []
    for x in polar_atoms:
        for d in dirs:
            w = x + 2.8 * d
            if tree.query(w)[0] >= 2.7 and cKDTree(pigment_b).query(w)[0] >= 3.0:
                cands.append((cKDTree(pigment_b).query(w)[0], tuple(np.round(w, 3))))
    waters = []
    for _d, w in sorted(cands):
        w = np.array(w)
        if all(np.linalg.norm(w - o) >= 2.8 for o in waters):
            waters.append(w)
        if len(waters) == n:
            break
    return waters


def pdb_line(rec, serial, name, resn, chain, resi, x, el, b=0.0):
    nm = name if len(name) == 4 else f" {name:<3s}"
    return (f"{rec:<6s}{serial:5d} {nm:<4s} {resn:>3s} {chain}{resi:4d}    "
            f"{x[0]:8.3f}{x[1]:8.3f}{x[2]:8.3f}{1.0:6.2f}{b:6.2f}          {el:>2s}")


def write_pdb(path, title, protein, pigments, waters):
    lines = [f"REMARK   1 {title}",
             "REMARK   1 INVENTED DEMO STRUCTURE GENERATED BY config/demo/make_demo.py"]
    k = 1
    for chain in ("A", "B"):
        for c, r, rn, name, el, x in protein:
            if c == chain:
                lines.append(pdb_line("ATOM", k, name, rn, c, r, x, el))
                k += 1
        lines.append(f"TER   {k:5d}      {rn:>3s} {chain}{r:4d}")
        k += 1
    for chain, names, els, X in pigments:
        for name, el, x in zip(names, els, X):
            lines.append(pdb_line("HETATM", k, name, "HC4", chain, 101, x, el))
            k += 1
    for i, w in enumerate(waters):
        lines.append(pdb_line("HETATM", k, "O", "HOH", "B", 201 + i, w, "O"))
        k += 1
    lines.append("END")
    Path(path).write_text("\n".join(lines) + "\n")


def main(outdir="config/demo"):
    from scipy.spatial import cKDTree
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    seq_a, seq_b, pocket = sequences()
    chains = {key: place_chain(build_helix(seq), key, +1 if key == "A" else -1)
              for key, seq in (("A", seq_a), ("B", seq_b))}
    wt = chains["A"] + chains["B"]
    heavy = lambda atoms: np.array([a[5] for a in atoms if a[4] != "H"])  # noqa: E731
    pocket_atoms = lambda atoms, c: np.array([a[5] for a in atoms  # noqa: E731
                                             if a[0] == c and a[1] in pocket and
                                             a[3] not in ("N", "C", "O", "CA")])
    names, els, XA, score = place_pigment([heavy(wt)], pocket_atoms(wt, "A"),
                                          pocket_atoms(wt, "B"))
    XB = c2(XA)
    # the mutant: Glu at the pocket residue closest to pigment A that fits without a clash
    tree = cKDTree(XA)
    by_dist = sorted(pocket, key=lambda r: min(tree.query(a[5])[0] for a in chains["A"]
                                               if a[1] == r and a[3] not in ("N", "C", "O", "CA")))
    for rnum in by_dist:
        seq_m = seq_a[:rnum - 1] + MUTANT_RESIDUE + seq_a[rnum:]
        chain_m = place_chain(build_helix(seq_m), "A", +1)
        if tree.query(heavy(chain_m))[0].min() >= 3.0:
            break
    else:
        raise RuntimeError("no pocket residue can take the mutation without a clash")
    mut = chain_m + chains["B"]
    polar_b = np.array([a[5] for a in chains["B"] if a[1] in pocket and a[4] in ("O", "N")
                        and a[3] not in ("N", "O")])
    waters = place_waters(heavy(wt), XB, polar_b)
    pigs = [("A", names, els, XA), ("B", names, els, XB)]
    tag = f"{MUTANT_CHAIN}_{seq_a[rnum - 1]}{rnum}{MUTANT_RESIDUE}"
    write_pdb(outdir / "pcd2_wt.pdb", "PCD-2 WILD TYPE (INVENTED)", wt, pigs, waters)
    write_pdb(outdir / f"pcd2_{tag}.pdb", f"PCD-2 MUTANT {tag} (INVENTED)", mut, pigs, waters)
    print(f"chain A {seq_a}\nchain B {seq_b}\nmutant A {seq_m} ({tag})\npocket residues "
          f"{pocket}; pigment contacts (min over sites) {score}; {len(waters)} waters")


if __name__ == "__main__":
    main(*sys.argv[1:])
