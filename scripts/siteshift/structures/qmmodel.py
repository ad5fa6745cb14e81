"""QM models of pigments: CCD-matched atoms, tail truncation, hydrogens from the CCD, caps.

Hydrogens come from the wwPDB Chemical Component Dictionary (offline copy shipped with biotite):
each heavy atom's hydrogens are taken from the CCD ideal coordinates and carried onto the structure
by a least-squares superposition (Kabsch, Acta Cryst. A32, 922 (1976)) of that atom and its bonded
heavy neighbourhood, so each hydrogen keeps the CCD bond length and local geometry. Bonds cut by the
library's truncation rules, or to tail atoms missing from the structure, are capped with hydrogen
along the cut bond at a standard X–H length.
"""
from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from ..base.geometry import kabsch  # noqa: F401 (re-exported: structures' users import it here)

#: X–H bond lengths for caps, Å (common practice; typical neutron/ideal values, from memory)
CAP_LENGTH = {"C": 1.09, "N": 1.01, "O": 0.96, "S": 1.34, "P": 1.42}


class ModelError(ValueError):
    pass


@lru_cache(maxsize=None)
def ccd_residue(code: str):
    """The CCD component (biotite AtomArray with bonds and ideal coordinates)."""
    import biotite.structure.info as info
    try:
        arr = info.residue(code)
    except KeyError:
        raise ModelError(f"CCD code {code} is not in the Chemical Component Dictionary shipped "
                         "with biotite") from None
    return arr


def ccd_graph(code: str):
    """(names, elements, ideal coords Å, adjacency dict name -> set(names))."""
    arr = ccd_residue(code)
    names = [str(n) for n in arr.atom_name]
    elements = [str(e).capitalize() for e in arr.element]
    adj = {n: set() for n in names}
    for i, j, _t in arr.bonds.as_array():
        adj[names[i]].add(names[j])
        adj[names[j]].add(names[i])
    # neighbour lists in CCD atom order: iteration order must not depend on string hashing, or
    # hydrogen placement (which picks reference atoms in this order) differs between processes
    order = {n: k for k, n in enumerate(names)}
    adj = {n: sorted(v, key=order.get) for n, v in adj.items()}
    return names, elements, np.asarray(arr.coord, float), adj


def formula(elements) -> str:
    """Hill formula (C, H first, then alphabetical; metals as written)."""
    c = Counter(str(e).capitalize() for e in elements)
    order = [k for k in ("C", "H") if k in c] + sorted(k for k in c if k not in ("C", "H"))
    parts = [f"{k}{c[k] if c[k] > 1 else ''}" for k in order]
    return "".join(parts)


@dataclass
class QMModel:
    pigment_id: str
    code: str
    elements: list
    coords: np.ndarray            # Å
    names: list                   # CCD atom names; hydrogens: CCD H names or CAP_<atom>
    origin: list                  # "structure", "ccd_h", "cap"
    charge: int
    multiplicity: int
    dropped: list = field(default_factory=list)
    missing: list = field(default_factory=list)
    problems: list = field(default_factory=list)
    rebuilt: list = field(default_factory=list)   # heavy atoms placed from the CCD
    ligands: list = field(default_factory=list)   # metal donors (see metal_donors)

    @property
    def formula(self) -> str:
        return formula(self.elements)

    @property
    def spin(self) -> int:
        return self.multiplicity - 1

    def index_of(self, name: str) -> int:
        return self.names.index(name)

    def to_xyz(self) -> str:
        return xyz_text(f"{self.pigment_id} {self.code} charge={self.charge} "
                        f"multiplicity={self.multiplicity} formula={self.formula}",
                        self.elements, self.names, self.coords)


def xyz_text(title, elements, names, coords) -> str:
    """An XYZ file's text: count, title, then element, x y z (Å) and the atom's name."""
    lines = [str(len(elements)), title]
    for e, n, (x, y, z) in zip(elements, names, coords):
        lines.append(f"{e:<2s} {x:14.6f} {y:14.6f} {z:14.6f}   {n}")
    return "\n".join(lines) + "\n"


def electrons(elements, charge) -> int:
    from pyscf.data.elements import charge as z
    return int(sum(z(e) for e in elements)) - int(charge)


def check_charge_spin(pigment_id, elements, charge, multiplicity, fix):
    """Raise ModelError if the electron count cannot have this multiplicity."""
    nelec = electrons(elements, charge)
    if (nelec + multiplicity - 1) % 2:
        raise ModelError(f"pigment {pigment_id}: charge {charge} and multiplicity {multiplicity} "
                         f"are impossible for {formula(elements)} ({nelec} electrons); {fix}")


def build_qm_model(pigment_id, code, atom_names, atom_elements, atom_coords, ptype,
                   charge=None, multiplicity=None, check_spin=True, replaced=(),
                   drop_h=()) -> QMModel:
    """The QM model of one pigment residue.

    atom_names / atom_elements / atom_coords: the pigment's atoms as read (hydrogens in the input
    are discarded and rebuilt from the CCD). ptype: its :class:`siteshift.structures.library.PigmentType`.
    replaced: CCD atoms a covalent link replaces (left out, neither rebuilt nor capped: the link
    partner takes the bond); drop_h: CCD hydrogens left out (a deprotonated group).
    """
    names, elements, ideal, adj = ccd_graph(code)
    drop_h = set(drop_h) | set(getattr(ptype, "drop_h", ()) or ())
    elem_of = dict(zip(names, elements))
    ideal_of = dict(zip(names, ideal))
    heavy = {n for n in names if elem_of[n] != "H"}
    have = {}
    unknown = []
    for n, e, x in zip(atom_names, atom_elements, atom_coords):
        n = str(n).strip()
        if n in replaced:
            continue
        if n in heavy:
            have[n] = np.asarray(x, float)
        elif n in elem_of or str(e).strip().upper() in ("H", "D"):
            continue  # input hydrogens are rebuilt
        else:
            unknown.append(n)
    missing_core = [a for a in ptype.core if a not in have and a not in replaced]
    if missing_core:
        raise ModelError(f"pigment {pigment_id}: core atom(s) {missing_core} missing from the "
                         "structure; rebuild them (e.g. from the CCD) or remove the pigment from "
                         "the study")
    # keep = component of the heavy-atom graph holding the core, after cutting library bonds
    cut = {frozenset(b) for b in ptype.cut_bonds}
    for b in ptype.cut_bonds:
        for a in b:
            if a not in heavy:
                raise ModelError(f"pigment library entry {code}: cut bond atom {a} is not a CCD "
                                 f"atom of {code}")
    missing = sorted(n for n in heavy - set(have))
    # the side of the cut bonds that holds the core, on the CCD graph: what every copy of this
    # pigment type holds. Atoms of it absent from the structure are rebuilt, so a copy missing an
    # ester carbon keeps the formula of its siblings instead of becoming a capped free acid.
    rebuilt = rebuild_missing(_core_side(ptype.core[0], adj, heavy - set(replaced), cut), have,
                              ideal_of, adj)
    keep = _core_side(ptype.core[0], adj, heavy, cut, present=have)
    dropped = sorted(heavy - keep)
    out_e, out_x, out_n, out_o = [], [], [], []
    for n in names:
        if n in keep:
            out_e.append(elem_of[n]); out_x.append(have[n]); out_n.append(n)
            out_o.append("rebuilt" if n in rebuilt else "structure")
    problems = [f"atom {n} not in CCD {code}; ignored" for n in unknown]
    if rebuilt:
        problems.append(f"atom(s) {rebuilt} missing from the structure; rebuilt from the CCD "
                        "ideal geometry superposed on their bonded neighbours")
    for x_name in [n for n in names if n in keep]:
        hs = [h for h in adj[x_name] if elem_of[h] == "H" and h not in drop_h]
        heavy_nb = [b for b in adj[x_name] if b in heavy]
        # local frame: the atom and its bonded heavy atoms present in the structure (dropped
        # tail atoms too, so hydrogens follow the structure's own geometry); only when fewer
        # than three points result (a methyl, a hydroxyl) one second neighbour fixes the torsion
        ref = [x_name] + [b for b in heavy_nb if b in have]
        for b in list(ref[1:]):
            if len(ref) >= 3:
                break
            ref += [c for c in adj[b] if c in have and c not in ref][:3 - len(ref)]
        if len(ref) < 3:
            raise ModelError(f"pigment {pigment_id}: cannot place hydrogens on {x_name}: too "
                             "few bonded heavy atoms present")
        R, t = kabsch(np.array([ideal_of[r] for r in ref]), np.array([have[r] for r in ref]))
        for h in hs:
            # direction from the superposition, length exactly the CCD's X–H bond
            v = (ideal_of[h] @ R + t) - have[x_name]
            d = np.linalg.norm(ideal_of[h] - ideal_of[x_name])
            out_e.append("H"); out_x.append(have[x_name] + d * v / np.linalg.norm(v))
            out_n.append(h); out_o.append("ccd_h")
        for b in heavy_nb:
            if b in keep or b in replaced:
                continue
            # cut or missing neighbour: cap along the bond (the CCD direction if it is missing)
            e_x = elem_of[x_name]
            if e_x not in CAP_LENGTH:
                problems.append(f"bond {x_name}-{b} cut at a {e_x} atom; left uncapped")
                continue
            v = (have[b] if b in have else ideal_of[b] @ R + t) - have[x_name]
            v = v / np.linalg.norm(v)
            out_e.append("H"); out_x.append(have[x_name] + CAP_LENGTH[e_x] * v)
            out_n.append(f"CAP_{x_name}"); out_o.append("cap")
    charge = ptype.charge if charge is None else int(charge)
    mult = ptype.multiplicity if multiplicity is None else int(multiplicity)
    if check_spin:
        check_charge_spin(pigment_id, out_e, charge, mult,
                          "fix the pigment library entry or the study's pigment override")
    return QMModel(pigment_id, code, out_e, np.array(out_x), out_n, out_o, charge, mult,
                   dropped=[d for d in dropped if d in have and d not in rebuilt],
                   missing=missing, problems=problems, rebuilt=rebuilt)


def _core_side(start, adj, heavy, cut, present=None):
    """Heavy atoms connected to `start` without crossing a cut bond (only through `present`
    atoms when given)."""
    keep, stack = {start}, [start]
    while stack:
        a = stack.pop()
        for b in adj[a]:
            if (b in heavy and b not in keep and frozenset((a, b)) not in cut
                    and (present is None or b in present)):
                keep.add(b)
                stack.append(b)
    return keep


def rebuild_missing(wanted, have, ideal_of, adj):
    """Place the atoms of `wanted` absent from `have` (dict name -> Å, updated in place) from
    the CCD ideal coordinates, growing outwards from the present atoms: each atom bonded to a
    present one is placed by a least-squares superposition (Kabsch) of the CCD ideal geometry on
    the present atoms of `wanted` within three bonds of it (at least three). Returns the names placed,
    in CCD order of placement."""
    placed = []
    todo = [n for n in ideal_of if n in wanted and n not in have]
    while todo:
        front = [n for n in todo if any(b in have for b in adj[n])]
        if not front:
            break
        for n in front:
            shell, ring = {n}, {n}
            for _ in range(3):
                ring = {c for a in ring for c in adj[a]} - shell
                shell |= ring
            # anchors on the kept side only: a flexible dropped tail (a propionate) fitted with
            # the ring misplaces its stem atom by up to 2.4 Å (19HC CAA); the ring alone: 0.1 Å
            ref = [a for a in ideal_of if a in shell and a in have and a in wanted]
            if len(ref) < 3:
                ref = [a for a in ideal_of if a in have and a in wanted]
            R, t = kabsch(np.array([ideal_of[a] for a in ref]), np.array([have[a] for a in ref]))
            have[n] = ideal_of[n] @ R + t
            placed.append(n)
        todo = [n for n in todo if n not in have]
    return placed


def close_contacts(model: QMModel, threshold=0.9):
    """Pairs (i, j, d) of a hydrogen and any other atom closer than `threshold` Å."""
    x = model.coords
    d = np.linalg.norm(x[:, None] - x[None], axis=-1)
    out = []
    for i, e in enumerate(model.elements):
        if e != "H":
            continue
        for j in range(len(x)):
            if j != i and d[i, j] < threshold:
                out.append((i, j, float(d[i, j])))
    return out
