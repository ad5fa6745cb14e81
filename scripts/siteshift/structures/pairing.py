"""Automatic pairing of pseudo-symmetric pigments across chains.

Two chains are superposed on their Cα atoms matched by a global sequence alignment
(Needleman–Wunsch with BLOSUM62, biotite) and least squares (Kabsch); each pigment of the first
chain is paired with the nearest pigment of the same CCD code in the second chain (centroid
distance after superposition). The RMSD of the superposition and the residual distance are
reported with every pair, so a poor match is visible.
"""
from __future__ import annotations

import itertools

import numpy as np

from .inventory import pigment_residues
from .qmmodel import kabsch

THREE_TO_ONE = {"ALA": "A", "ARG": "R", "ASN": "N", "ASP": "D", "CYS": "C", "GLN": "Q",
                "GLU": "E", "GLY": "G", "HIS": "H", "ILE": "I", "LEU": "L", "LYS": "K",
                "MET": "M", "PHE": "F", "PRO": "P", "SER": "S", "THR": "T", "TRP": "W",
                "TYR": "Y", "VAL": "V", "MSE": "M"}


def _chain_ca(atoms, chain):
    ca = atoms.select_atoms(f"name CA and chainID {chain}")
    keep = [i for i, r in enumerate(ca.resnames) if r in THREE_TO_ONE]
    ca = ca[keep]
    return "".join(THREE_TO_ONE[r] for r in ca.resnames), ca.positions.astype(float), ca


def _alignment(atoms, c1, c2):
    """(matched index pairs, Cα coordinates of c1, of c2, Cα atoms of c1, of c2)."""
    from biotite.sequence import ProteinSequence
    from biotite.sequence.align import SubstitutionMatrix, align_optimal
    s1, x1, a1 = _chain_ca(atoms, c1)
    s2, x2, a2 = _chain_ca(atoms, c2)
    if len(s1) < 3 or len(s2) < 3:
        raise ValueError(f"chains {c1} and {c2}: fewer than 3 protein Cα atoms to superpose")
    matrix = SubstitutionMatrix.std_protein_matrix()
    ali = align_optimal(ProteinSequence(s1), ProteinSequence(s2), matrix, gap_penalty=(-10, -1),
                        terminal_penalty=False, max_number=1)[0]
    idx = ali.trace[(ali.trace[:, 0] >= 0) & (ali.trace[:, 1] >= 0)]
    return idx, x1, x2, a1, a2


def aligned_residues(atoms, c1, c2) -> dict:
    """{(resname, resid) of chain c1: (resname, resid) of chain c2} for residues matched by the
    same sequence alignment that superposes the chains."""
    idx, _x1, _x2, a1, a2 = _alignment(atoms, c1, c2)
    return {(str(a1[i].resname), int(a1[i].resid)): (str(a2[j].resname), int(a2[j].resid))
            for i, j in idx}


def superpose_chains(atoms, c1, c2):
    """(R, t, rmsd_A, n_matched) mapping chain c1 onto chain c2 (row vectors: x R + t)."""
    idx, x1, x2, _a1, _a2 = _alignment(atoms, c1, c2)
    P, Q = x1[idx[:, 0]], x2[idx[:, 1]]
    R, t = kabsch(P, Q)
    rmsd = float(np.sqrt(((P @ R + t - Q) ** 2).sum(1).mean()))
    return R, t, rmsd, len(idx)


def auto_pairs_by_superposition(atoms, library, codes=None):
    """Rows {name, pigment_a, pigment_b, ccd_code, chain_a, chain_b, rmsd_A, n_ca, distance_A}."""
    pigs, _ = pigment_residues(atoms, library)
    if codes:
        pigs = [p for p in pigs if p.code in codes]
    by_chain = {}
    for p in pigs:
        by_chain.setdefault(p.chain, []).append(p)
    rows = []
    for c1, c2 in itertools.combinations(sorted(by_chain), 2):
        try:
            R, t, rmsd, n = superpose_chains(atoms, c1, c2)
        except ValueError:
            continue
        taken = set()
        for p in by_chain[c1]:
            x = p.atoms.positions.mean(0) @ R + t
            cands = [(np.linalg.norm(q.atoms.positions.mean(0) - x), q) for q in by_chain[c2]
                     if q.code == p.code and q.id not in taken]
            if not cands:
                continue
            d, q = min(cands, key=lambda c: c[0])
            taken.add(q.id)
            rows.append({"name": f"{p.id}~{q.id}", "pigment_a": p.id, "pigment_b": q.id,
                         "ccd_code": p.code, "chain_a": c1, "chain_b": c2,
                         "rmsd_A": round(rmsd, 3), "n_ca": n, "distance_A": round(float(d), 3)})
    return rows
