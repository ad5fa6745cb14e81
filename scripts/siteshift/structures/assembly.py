"""Biological assemblies: which pigments sit at an interface with a copy that the structure file
leaves out.

A deposited entry holds the asymmetric unit; its assembly records (PDB REMARK 350 BIOMT,
mmCIF _pdbx_struct_assembly_gen / _pdbx_struct_oper_list; read with gemmi) say how to make the
biological unit. When the unit needs copies the file does not hold (a homodimer deposited as one
protomer), a pigment at the interface looks solvent-exposed: its burial, its ε and its charges miss
the partner. This module places those copies and reports, per pigment, the atoms of each copy
within a cutoff, so the inventory can warn.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np


def _copies(path, assembly=None):
    """(assembly name, [(operator name, chains, heavy-atom coords Å)]) of the copies that the
    assembly adds to the file (identity operators skipped); (None, []) without records."""
    import gemmi
    st = gemmi.read_structure(str(path))
    st.setup_entities()
    if not len(st.assemblies):
        return None, []
    asm = st.assemblies[0]
    if assembly is not None:
        hits = [a for a in st.assemblies if a.name == str(assembly)]
        if not hits:
            raise ValueError(f"{path}: no assembly {assembly!r}; present: "
                             f"{[a.name for a in st.assemblies]}")
        asm = hits[0]
    model = st[0]
    out = []
    for gen in asm.generators:
        chains, subs = set(gen.chains), set(gen.subchains)
        xyz, names = [], set()
        for ch in model:
            for res in ch:
                if ch.name in chains or res.subchain in subs:
                    names.add(ch.name)
                    xyz += [a.pos.tolist() for a in res if a.element.name not in ("H", "D")]
        if not xyz:
            continue
        xyz = np.asarray(xyz)
        for op in gen.operators:
            R = np.asarray(op.transform.mat.tolist())
            t = np.asarray(op.transform.vec.tolist())
            if np.allclose(R, np.eye(3), atol=1e-6) and np.allclose(t, 0.0, atol=1e-3):
                continue
            out.append((str(op.name), sorted(names), xyz @ R.T + t))
    return str(asm.name), out


def interface_contacts(path, pigment_coords: dict, cutoff_A=6.0, assembly=None) -> dict:
    """{pigment id: [{"assembly", "operator", "chains", "n_atoms", "closest_A"}]} for every
    pigment with heavy atoms of an assembly copy (one the file lacks) within cutoff_A.
    pigment_coords: {pigment id: heavy-atom coordinates Å}."""
    from scipy.spatial import cKDTree
    name, copies = _copies(Path(path), assembly)
    out = {}
    for op, chains, cx in copies:
        tree = cKDTree(cx)
        for pid, px in pigment_coords.items():
            px = np.asarray(px, float)
            hits = sorted({j for near in tree.query_ball_point(px, cutoff_A) for j in near})
            if hits:
                d = np.linalg.norm(cx[hits][:, None] - px[None], axis=-1).min()
                out.setdefault(pid, []).append({"assembly": name, "operator": op,
                                                "chains": chains, "n_atoms": len(hits),
                                                "closest_A": round(float(d), 2)})
    return out
