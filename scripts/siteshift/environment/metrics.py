"""Local environment metrics of a pigment site: packing, hydropathy, polarity, waters, burial.

All distances in Å. Each metric follows a published definition where one exists:
- Shrake & Rupley solvent-accessible surface, J. Mol. Biol. 79, 351 (1973);
- Kyte & Doolittle hydropathy, J. Mol. Biol. 157, 105 (1982);
- smooth Gaussian density ρ = 1 − Π(1 − exp(−|r − r_i|²/(σ² R_i²))),
  Li, Li, Zhang, Alexov, JCTC 9, 2126 (2013).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from ..base.defaults import default
from ..base.elements import VDW_RADII, radius

#: Kyte–Doolittle hydropathy index (J. Mol. Biol. 157, 105 (1982), Table 2)
KYTE_DOOLITTLE = {
    "ALA": 1.8, "ARG": -4.5, "ASN": -3.5, "ASP": -3.5, "CYS": 2.5, "GLN": -3.5, "GLU": -3.5,
    "GLY": -0.4, "HIS": -3.2, "ILE": 4.5, "LEU": 3.8, "LYS": -3.9, "MET": 1.9, "PHE": 2.8,
    "PRO": -1.6, "SER": -0.8, "THR": -0.7, "TRP": -0.9, "TYR": -1.3, "VAL": 4.2,
}
#: Eisenberg normalised consensus hydrophobicity (Eisenberg, Schwarz, Komaromy, Wall,
#: J. Mol. Biol. 179, 125 (1984)); values from memory, checked for order against Kyte–Doolittle
EISENBERG = {
    "ALA": 0.62, "ARG": -2.53, "ASN": -0.78, "ASP": -0.90, "CYS": 0.29, "GLN": -0.85,
    "GLU": -0.74, "GLY": 0.48, "HIS": -0.40, "ILE": 1.38, "LEU": 1.06, "LYS": -1.50,
    "MET": 0.64, "PHE": 1.19, "PRO": 0.12, "SER": -0.18, "THR": -0.05, "TRP": 0.81,
    "TYR": 0.26, "VAL": 1.08,
}
HYDROPATHY_SCALES = {"kyte_doolittle": KYTE_DOOLITTLE, "eisenberg": EISENBERG}
_ALIASES = {"HID": "HIS", "HIE": "HIS", "HIP": "HIS", "HSD": "HIS", "HSE": "HIS", "HSP": "HIS",
            "MSE": "MET", "CYX": "CYS", "ASH": "ASP", "GLH": "GLU", "LYN": "LYS"}

#: charged groups: residue -> atoms that carry the charge, and the sign
CHARGED_GROUPS = {"ASP": (("OD1", "OD2"), -1), "GLU": (("OE1", "OE2"), -1),
                  "LYS": (("NZ",), +1), "ARG": (("NE", "NH1", "NH2"), +1),
                  "HIP": (("ND1", "NE2"), +1), "HSP": (("ND1", "NE2"), +1)}
METAL_IONS = {"NA": 1, "K": 1, "MG": 2, "CA": 2, "ZN": 2, "FE": 3, "FE2": 2, "MN": 2, "CU": 2,
              "NI": 2, "CD": 2, "CO": 2}
WATERS = {"HOH", "WAT", "DOD", "H2O", "TIP3", "SOL"}


def sphere_points(n: int) -> np.ndarray:
    """n nearly uniform unit vectors (golden-section spiral)."""
    k = np.arange(n) + 0.5
    phi = np.arccos(1 - 2 * k / n)
    theta = np.pi * (1 + 5 ** 0.5) * k
    return np.stack([np.cos(theta) * np.sin(phi), np.sin(theta) * np.sin(phi), np.cos(phi)], 1)


def accessible_points(coords, radii, probe=1.4, n_points=960, others=None, other_radii=None):
    """Shrake–Rupley: per atom, the points of its probe-expanded sphere not inside any other
    atom's expanded sphere. Returns (points array (m, 3), owner atom index (m,), area per atom)."""
    coords = np.asarray(coords, float)
    radii = np.asarray(radii, float) + probe
    if others is not None and len(others):
        allc = np.vstack([coords, np.asarray(others, float)])
        allr = np.concatenate([radii, np.asarray(other_radii, float) + probe])
    else:
        allc, allr = coords, radii
    tree = cKDTree(allc)
    unit = sphere_points(n_points)
    rmax = allr.max()
    pts, owner, area = [], [], np.zeros(len(coords))
    for i, (c, r) in enumerate(zip(coords, radii)):
        p = c + r * unit
        nb = [j for j in tree.query_ball_point(c, r + rmax) if j != i]
        free = np.ones(n_points, bool)
        if nb:
            d2 = ((p[:, None, :] - allc[nb][None]) ** 2).sum(-1)
            free = ~np.any(d2 < allr[nb][None] ** 2, axis=1)
        area[i] = 4 * np.pi * r * r * free.mean()
        pts.append(p[free])
        owner.append(np.full(free.sum(), i))
    if pts:
        return np.vstack(pts), np.concatenate(owner), area
    return np.zeros((0, 3)), np.zeros(0, int), area


def sasa(coords, elements, probe=1.4, n_points=960, others=None, other_elements=None):
    """Solvent-accessible surface area per atom (Å²) of `coords`, occluded by `others` too."""
    r = [radius(e) for e in elements]
    ro = [radius(e) for e in other_elements] if other_elements is not None else None
    return accessible_points(coords, r, probe, n_points, others, ro)[2]


def gaussian_density(points, coords, radii, sigma=0.93):
    """Li–Alexov smooth density at `points` from atoms at `coords` with radii `radii`.

    ρ_i(r) = exp(−|r − r_i|² / (σ² R_i²)), ρ(r) = 1 − Π_i (1 − ρ_i(r)).
    """
    points = np.asarray(points, float)
    if len(coords) == 0 or len(points) == 0:
        return np.zeros(len(points))
    d2 = ((points[:, None, :] - np.asarray(coords, float)[None]) ** 2).sum(-1)
    rho_i = np.exp(-d2 / (sigma ** 2 * np.asarray(radii, float)[None] ** 2))
    return 1.0 - np.prod(1.0 - rho_i, axis=1)


_ENV = default("environment")  # the study config schema's defaults (siteshift.base.defaults)


@dataclass
class EnvironmentSettings:
    shells_A: tuple = (4.0, 6.0, 8.0)    # heavy-atom counts within these distances
    contact_cutoff_A: float = _ENV["contact_cutoff_A"]   # residue contacts weighting hydropathy
    polar_cutoff_A: float = _ENV["polar_cutoff_A"]       # N/O atoms counted as polar contacts
    ligand_cutoff_A: float = 2.6         # closer than this: a bonded ligand (e.g. axial His)
    charge_cutoff_A: float = _ENV["charge_cutoff_A"]     # charged groups counted
    water_cutoff_A: float = _ENV["water_cutoff_A"]       # water oxygens counted
    probe_A: float = _ENV["probe_A"]                     # SASA probe (water)
    sasa_points: int = _ENV["sasa_points"]
    density_sigma: float = _ENV["density_sigma"]         # Li et al. 2013
    hydropathy_scale: str = _ENV["hydropathy_scale"]


def site_metrics(pig_coords, pig_elements, env, settings: EnvironmentSettings | None = None):
    """Metrics of one site.

    pig_coords / pig_elements: the pigment's heavy atoms (Å).
    env: dict of arrays for every other heavy atom of the structure: coords (n, 3), elements,
    resnames, names, resids, chains (any order).
    """
    s = settings or EnvironmentSettings()
    if s.hydropathy_scale not in HYDROPATHY_SCALES:
        raise ValueError(f"hydropathy_scale {s.hydropathy_scale!r} not one of "
                         f"{sorted(HYDROPATHY_SCALES)}")
    scale = HYDROPATHY_SCALES[s.hydropathy_scale]
    P = np.asarray(pig_coords, float)
    E = np.asarray(env["coords"], float).reshape(-1, 3)
    el = np.char.upper(np.asarray(env["elements"]).astype(str))
    resn = np.char.upper(np.asarray(env["resnames"]).astype(str))
    names = np.asarray(env["names"]).astype(str)
    reskey = np.array([f"{c}:{n}{i}" for c, n, i in zip(env["chains"], resn, env["resids"])])
    out = {}
    if len(E):
        dmin = cKDTree(P).query(E)[0]
    else:
        dmin = np.zeros(0)
    for r in s.shells_A:
        out[f"n_heavy_{r:g}A"] = int(np.sum(dmin <= r))
    # hydropathy: residues weighted by their heavy atoms within the contact cutoff
    contact = dmin <= s.contact_cutoff_A
    w_tot, kd_sum, n_res = 0, 0.0, 0
    for key in np.unique(reskey[contact]):
        m = contact & (reskey == key)
        rn = _ALIASES.get(resn[m][0], resn[m][0])
        if rn in scale:
            w = int(m.sum())
            w_tot += w
            kd_sum += w * scale[rn]
            n_res += 1
    out["n_contact_residues"] = n_res
    out["hydropathy"] = kd_sum / w_tot if w_tot else 0.0
    out["hydropathy_scale"] = s.hydropathy_scale
    # polarity
    is_water = np.isin(resn, list(WATERS))
    # atoms coordinating a pigment metal (closer than 2.6 Å) are ligands, not polar neighbours
    ligand = dmin < s.ligand_cutoff_A
    polar = np.isin(el, ["N", "O"]) & ~is_water & ~ligand & (dmin <= s.polar_cutoff_A)
    out["n_polar_atoms"] = int(polar.sum())
    cand = np.isin(el, ["N", "O"]) & ~is_water & ~ligand
    out["min_polar_distance_A"] = float(dmin[cand].min()) if np.any(cand) else float("nan")
    out["n_ligating_atoms"] = int(ligand.sum())
    groups = []
    for key in np.unique(reskey[dmin <= s.charge_cutoff_A]):
        m = reskey == key
        rn = resn[m][0]
        if rn in CHARGED_GROUPS:
            atoms, sign = CHARGED_GROUPS[rn]
            g = m & np.isin(names, atoms)
            if np.any(g) and dmin[g].min() <= s.charge_cutoff_A:
                groups.append((key, sign, float(dmin[g].min())))
        elif rn in METAL_IONS and m.sum() == 1:
            groups.append((key, METAL_IONS[rn], float(dmin[m].min())))
    out["n_charged_groups"] = len(groups)
    out["net_charge_nearby"] = int(sum(g[1] for g in groups))
    out["charged_groups"] = "; ".join(f"{k}({'+' if q > 0 else ''}{q}) {d:.1f} A"
                                      for k, q, d in sorted(groups, key=lambda g: g[2]))
    wat = is_water & (el == "O") & (dmin <= s.water_cutoff_A)
    out["n_waters"] = int(wat.sum())
    # burial: SASA alone vs in the complex (heavy atoms)
    pr = [radius(e) for e in pig_elements]
    alone_pts, owner, alone_area = accessible_points(P, pr, s.probe_A, s.sasa_points)
    near = dmin <= 2 * (max(VDW_RADII.values()) + s.probe_A)
    cplx_area = accessible_points(P, pr, s.probe_A, s.sasa_points, E[near],
                                  [radius(e) for e in el[near]])[2]
    out["sasa_alone_A2"] = float(alone_area.sum())
    out["sasa_complex_A2"] = float(cplx_area.sum())
    out["exposure"] = float(cplx_area.sum() / alone_area.sum()) if alone_area.sum() else 0.0
    out["burial"] = 1.0 - out["exposure"]
    # packing: Gaussian density of the surroundings on the pigment's accessible surface
    near_d = dmin <= 10.0
    rho = gaussian_density(alone_pts, E[near_d], [radius(e) for e in el[near_d]], s.density_sigma)
    out["packing_density"] = float(rho.mean()) if len(rho) else 0.0
    return out


def environment_arrays(atoms, exclude_mask=None):
    """Heavy-atom arrays of an MDAnalysis AtomGroup for :func:`site_metrics`."""
    el = np.asarray(atoms.elements if hasattr(atoms, "elements") else atoms.types).astype(str)
    heavy = ~np.isin(np.char.upper(el), ["H", "D"])
    if exclude_mask is not None:
        heavy &= ~exclude_mask
    ag = atoms[heavy]
    chains = np.asarray(ag.chainIDs).astype(str) if hasattr(ag, "chainIDs") else \
        np.asarray(ag.segids).astype(str)
    return {"coords": ag.positions.astype(float), "elements": el[heavy],
            "resnames": np.asarray(ag.resnames).astype(str), "names": np.asarray(ag.names),
            "resids": np.asarray(ag.resids), "chains": chains}
