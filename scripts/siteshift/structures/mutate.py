"""Point mutations in silico: side chains rebuilt by PDBFixer (OpenMM), cofactors and waters kept.

Notation: ``CHAIN:XnY`` with one-letter amino-acid codes, e.g. ``A:L121E`` (chain A, residue 121,
Leu → Glu); an insertion code may follow the number (``A:L121aE``). The wild-type residue is
checked, so a typo names the residue actually found.
"""
from __future__ import annotations

import re
from pathlib import Path

import numpy as np

ONE_TO_THREE = {"A": "ALA", "R": "ARG", "N": "ASN", "D": "ASP", "C": "CYS", "Q": "GLN",
                "E": "GLU", "G": "GLY", "H": "HIS", "I": "ILE", "L": "LEU", "K": "LYS",
                "M": "MET", "F": "PHE", "P": "PRO", "S": "SER", "T": "THR", "W": "TRP",
                "Y": "TYR", "V": "VAL"}
PATTERN = re.compile(r"^([A-Za-z0-9]+):([A-Z])(-?\d+)([A-Za-z]?)([A-Z])$")


class MutationError(ValueError):
    pass


#: side-chain torsions χ1, χ2 (IUPAC-IUB 1970 definitions); deeper χ are kept as built
CHI = {"ARG": [("N", "CA", "CB", "CG"), ("CA", "CB", "CG", "CD")],
       "ASN": [("N", "CA", "CB", "CG"), ("CA", "CB", "CG", "OD1")],
       "ASP": [("N", "CA", "CB", "CG"), ("CA", "CB", "CG", "OD1")],
       "CYS": [("N", "CA", "CB", "SG")],
       "GLN": [("N", "CA", "CB", "CG"), ("CA", "CB", "CG", "CD")],
       "GLU": [("N", "CA", "CB", "CG"), ("CA", "CB", "CG", "CD")],
       "HIS": [("N", "CA", "CB", "CG"), ("CA", "CB", "CG", "ND1")],
       "ILE": [("N", "CA", "CB", "CG1"), ("CA", "CB", "CG1", "CD1")],
       "LEU": [("N", "CA", "CB", "CG"), ("CA", "CB", "CG", "CD1")],
       "LYS": [("N", "CA", "CB", "CG"), ("CA", "CB", "CG", "CD")],
       "MET": [("N", "CA", "CB", "CG"), ("CA", "CB", "CG", "SD")],
       "PHE": [("N", "CA", "CB", "CG"), ("CA", "CB", "CG", "CD1")],
       "SER": [("N", "CA", "CB", "OG")], "THR": [("N", "CA", "CB", "OG1")],
       "TRP": [("N", "CA", "CB", "CG"), ("CA", "CB", "CG", "CD1")],
       "TYR": [("N", "CA", "CB", "CG"), ("CA", "CB", "CG", "CD1")],
       "VAL": [("N", "CA", "CB", "CG1")]}
_DEPTH = {"B": 1, "G": 2, "D": 3, "E": 4, "Z": 5, "H": 6}


def _depth(name):
    return _DEPTH.get(name[1], 0) if len(name) > 1 and name not in ("CA", "N", "C", "O") else 0


def _rotate(x, a, b, angle):
    """Rotate points x about the axis a→b by angle (radians), Rodrigues' formula."""
    k = (b - a) / np.linalg.norm(b - a)
    v = x - b
    return b + v * np.cos(angle) + np.cross(k, v) * np.sin(angle) + \
        np.outer(v @ k, k) * (1 - np.cos(angle))


def choose_rotamer(res_names, res_x, resname, others, step_deg=30):
    """Side-chain coordinates with χ1/χ2 chosen on a grid to maximise the closest approach to
    `others` (heavy atoms of everything else). Returns (new coordinates, closest distance)."""
    names = list(res_names)
    x0 = np.array(res_x, float)
    chis = [c for c in CHI.get(resname, []) if all(a in names for a in c)]
    if not chis:
        return x0, _closest(x0, names, others)
    angles = np.deg2rad(np.arange(0, 360, step_deg))
    best = (-1.0, x0)
    grids = [angles] + [angles if len(chis) > 1 else [0.0]]
    for a1 in grids[0]:
        for a2 in grids[1]:
            x = x0.copy()
            for chi, ang in zip(chis, (a1, a2)):
                b, c = names.index(chi[1]), names.index(chi[2])
                move = [i for i, n in enumerate(names) if _depth(n) > _depth(chi[2])]
                x[move] = _rotate(x[move], x[b], x[c], ang)
            d = _closest(x, names, others)
            if d > best[0]:
                best = (d, x)
    return best[1], best[0]


def _closest(x, names, others):
    side = [i for i, n in enumerate(names) if _depth(n) >= 2]
    if not side or len(others) == 0:
        return float("inf")
    return float(np.min(np.linalg.norm(x[side][:, None] - others[None], axis=-1)))


def parse_mutation(text: str):
    m = PATTERN.match(text.strip())
    if not m or m.group(2) not in ONE_TO_THREE or m.group(5) not in ONE_TO_THREE:
        raise MutationError(f"mutation {text!r}: expected CHAIN:XnY with one-letter amino acids, "
                            "e.g. A:L121E")
    chain, wt, num, icode, new = m.groups()
    return chain, ONE_TO_THREE[wt], int(num), icode, ONE_TO_THREE[new]


def mutate(structure, mutations, out_pdb, min_contact_A=2.2):
    """Apply point mutations to `structure` and write `out_pdb`; return a report dict.

    Raises MutationError naming the residue when the wild-type residue does not match or the
    chain/residue is absent. The rebuilt side chains' closest approach to any other heavy atom
    is reported; below `min_contact_A` the mutation is refused (a clash PDBFixer cannot resolve).
    """
    from openmm.app import PDBFile
    from pdbfixer import PDBFixer

    structure = Path(structure)
    if structure.suffix == ".gz" or structure.suffix.lower() not in (".pdb", ".ent"):
        raise MutationError(f"{structure}: in-silico mutation needs an uncompressed PDB file")
    fixer = PDBFixer(filename=str(structure))
    by_chain = {}
    for text in mutations:
        chain, wt, num, icode, new = parse_mutation(text)
        ids = {c.id for c in fixer.topology.chains()}
        if chain not in ids:
            raise MutationError(f"mutation {text}: chain {chain} not in {structure} "
                                f"(chains {sorted(ids)})")
        # a chain id can label several OpenMM chains (protein, then its ligands after TER)
        found = [r for c in fixer.topology.chains() if c.id == chain for r in c.residues()
                 if r.id.strip() == str(num) and (r.insertionCode or "").strip() == icode]
        if not found:
            raise MutationError(f"mutation {text}: residue {chain}:{num}{icode} not in {structure}")
        if found[0].name != wt:
            raise MutationError(f"mutation {text}: residue {chain}:{num}{icode} is "
                                f"{found[0].name}, not {wt}")
        by_chain.setdefault(chain, []).append(f"{wt}-{num}-{new}")
    for chain, muts in by_chain.items():
        fixer.applyMutations(muts, chain)
    fixer.findMissingResidues()
    fixer.missingResidues = {}
    fixer.findMissingAtoms()
    fixer.addMissingAtoms()
    out_pdb = Path(out_pdb)
    out_pdb.parent.mkdir(parents=True, exist_ok=True)
    tmp = out_pdb.with_suffix(".part.pdb")
    with open(tmp, "w") as fh:
        PDBFile.writeFile(fixer.topology, fixer.positions, fh, keepIds=True)
    # PDBFixer builds side chains without regard to cofactors: pick χ1/χ2 on a grid to keep
    # the rebuilt side chains clear of every other heavy atom, then check what was achieved
    import MDAnalysis as mda
    u = mda.Universe(str(tmp))
    report = {"structure": str(structure), "mutations": list(mutations), "closest_A": {}}
    heavy = u.select_atoms("not element H")
    for text in mutations:
        chain, _wt, num, _ic, new = parse_mutation(text)
        res = heavy.select_atoms(f"chainID {chain} and resid {num} and protein")
        rest = heavy - res
        x, d = choose_rotamer(list(res.names), res.positions, new, rest.positions.astype(float))
        res.positions = x
        report["closest_A"][text] = round(d, 3)
        if d < min_contact_A:
            tmp.unlink()
            raise MutationError(f"mutation {text}: no χ1/χ2 keeps the rebuilt side chain more "
                                f"than {min_contact_A} A from other heavy atoms (best {d:.2f} A); "
                                "supply the mutant as its own structure file")
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        u.atoms.write(str(tmp))
    tmp.replace(out_pdb)
    return report
