"""Environment metrics and the dielectric model, against published values and independent codes."""
import numpy as np
import pytest

from siteshift.environment.dielectric import DielectricModel, DielectricError
from siteshift.environment.metrics import (KYTE_DOOLITTLE, EnvironmentSettings, gaussian_density,
                                           radius, sasa, site_metrics)


def test_kyte_doolittle_table():
    # Kyte & Doolittle, J. Mol. Biol. 157, 105 (1982), Table 2 (as listed in REFERENCES.md)
    published = {"A": 1.8, "R": -4.5, "N": -3.5, "D": -3.5, "C": 2.5, "Q": -3.5, "E": -3.5,
                 "G": -0.4, "H": -3.2, "I": 4.5, "L": 3.8, "K": -3.9, "M": 1.9, "F": 2.8,
                 "P": -1.6, "S": -0.8, "T": -0.7, "W": -0.9, "Y": -1.3, "V": 4.2}
    three = {"A": "ALA", "R": "ARG", "N": "ASN", "D": "ASP", "C": "CYS", "Q": "GLN", "E": "GLU",
             "G": "GLY", "H": "HIS", "I": "ILE", "L": "LEU", "K": "LYS", "M": "MET", "F": "PHE",
             "P": "PRO", "S": "SER", "T": "THR", "W": "TRP", "Y": "TYR", "V": "VAL"}
    assert {three[k]: v for k, v in published.items()} == KYTE_DOOLITTLE


def test_sasa_matches_biotite():
    # Independent Shrake–Rupley: biotite.structure.sasa, same atoms, radii and probe (< 2 %)
    import biotite.structure as struc
    import biotite.structure.info as info
    arr = info.residue("BCL")
    arr = arr[arr.element != "H"]
    radii = np.array([radius(e) for e in arr.element])
    ref = struc.sasa(arr, probe_radius=1.4, point_number=1000, vdw_radii=radii)
    ours = sasa(arr.coord, arr.element, probe=1.4, n_points=1000)
    assert abs(ours.sum() - np.nansum(ref)) / np.nansum(ref) < 0.02
    # per-atom agreement for the well-exposed atoms
    big = ref > 10
    assert np.allclose(ours[big], ref[big], rtol=0.1)


def test_sasa_isolated_sphere_is_analytic():
    # one atom alone: 4π(R + probe)² (geometry)
    a = sasa([[0.0, 0.0, 0.0]], ["C"], probe=1.4, n_points=500)
    assert a[0] == pytest.approx(4 * np.pi * (1.7 + 1.4) ** 2, rel=1e-12)


def test_gaussian_density_hand_computation():
    # Li, Li, Zhang, Alexov, JCTC 9, 2126 (2013): ρ = 1 − Π(1 − exp(−d²/(σ²R²)))
    atoms = np.array([[0.0, 0, 0], [3.0, 0, 0], [0, 4.0, 0]])
    radii = np.array([1.7, 1.55, 1.52])
    p = np.array([[1.0, 1.0, 0.0]])
    sigma = 0.93
    d2 = np.array([2.0, 5.0, 10.0])
    rho_i = np.exp(-d2 / (sigma ** 2 * radii ** 2))
    hand = 1 - (1 - rho_i[0]) * (1 - rho_i[1]) * (1 - rho_i[2])
    assert gaussian_density(p, atoms, radii, sigma)[0] == pytest.approx(hand, rel=1e-12)


def _site(env_atoms):
    """A phenol-sized flat pigment at the origin and a list of (resname, name, element, xyz)."""
    ring = [[1.4 * np.cos(t), 1.4 * np.sin(t), 0.0] for t in np.linspace(0, 2 * np.pi, 6, False)]
    pig = np.array(ring + [[2.8, 0.0, 0.0]])
    pel = ["C"] * 6 + ["O"]
    env = {"coords": np.array([a[3] for a in env_atoms]).reshape(-1, 3),
           "elements": np.array([a[2] for a in env_atoms]),
           "resnames": np.array([a[0] for a in env_atoms]),
           "names": np.array([a[1] for a in env_atoms]),
           "resids": np.arange(len(env_atoms)), "chains": np.array(["A"] * len(env_atoms))}
    return pig, pel, env


def _shell(kind, n=14, r=4.2):
    out = []
    pts = [[r * np.cos(t), r * np.sin(t), z] for z in (-3.4, 3.4)
           for t in np.linspace(0, 2 * np.pi, n // 2, False)]
    for k, x in enumerate(pts):
        if kind == "apolar":
            out.append((["LEU", "ILE", "PHE"][k % 3], "CD1", "C", x))
        else:
            out.append(["ASP OD1 O", "LYS NZ N", "HOH O O", "GLU OE1 O", "ARG NH1 N",
                        "HOH O O", "SER OG O"][k % 7].split() + [x])
    return [tuple(o) for o in out]


def test_vacuum_site_maps_to_eps_min():
    pig, pel, env = _site([])
    m = site_metrics(pig, pel, env)
    model = DielectricModel(exposed_medium="vacuum")
    assert model.assign("X_PIG1", m)["eps_static"] == model.eps_min


def test_polar_site_higher_than_apolar():
    model = DielectricModel()
    apolar = site_metrics(*_site(_shell("apolar")))
    polar = site_metrics(*_site(_shell("polar")))
    assert apolar["hydropathy"] > 3 and polar["n_charged_groups"] >= 4
    assert polar["n_waters"] >= 2
    ea = model.assign("A", apolar)["eps_static"]
    ep = model.assign("B", polar)["eps_static"]
    assert ep > ea + 1.0


def test_dielectric_bounds_and_errors():
    m = {"burial": 0.0, "exposure": 1.0, "n_charged_groups": 100}
    row = DielectricModel().assign("X", m)
    assert row["eps_static"] == 20.0 and row["clipped"]
    assert row["eps_optical"] <= row["eps_static"]
    uni = DielectricModel(mode="uniform", eps_uniform=4.0).assign("X", m)
    assert uni["eps_static"] == 4.0
    ov = DielectricModel(overrides={"X": {"eps_static": 3.0, "eps_optical": 1.9}}).assign("X", m)
    assert (ov["eps_static"], ov["eps_optical"], ov["source"]) == (3.0, 1.9, "override")
    with pytest.raises(DielectricError, match="eps_optical"):
        DielectricModel(overrides={"X": {"eps_static": 2.0, "eps_optical": 3.0}}).assign("X", m)
    with pytest.raises(DielectricError, match="unknown dielectric coefficient"):
        DielectricModel(coefficients={"bogus": 1.0}).check()


def test_19hc_burial_and_dielectric_ordering(hc19_path, library):
    # Real structure: PDB 19HC. Ranking by burial must be the SASA ranking, and the most buried
    # heme must get a lower ε_static than the most exposed one.
    from siteshift.structures.inventory import pigment_residues
    from siteshift.structures.reading import read_structure
    from siteshift.study.stages import measure_site
    atoms = read_structure(hc19_path)
    pigs, _ = pigment_residues(atoms, library)
    model = DielectricModel()
    rows = []
    for r in pigs:
        met = measure_site(atoms, r, library, EnvironmentSettings(sasa_points=240))
        rows.append((r.id, met, model.assign(r.id, met)))
    assert len(rows) == 18
    by_burial = [r[0] for r in sorted(rows, key=lambda r: -r[1]["burial"])]
    by_sasa = [r[0] for r in sorted(rows, key=lambda r: r[1]["sasa_complex_A2"]
                                    / r[1]["sasa_alone_A2"])]
    assert by_burial == by_sasa
    most_buried = max(rows, key=lambda r: r[1]["burial"])
    most_exposed = min(rows, key=lambda r: r[1]["burial"])
    assert most_exposed[1]["exposure"] > most_buried[1]["exposure"]
    assert most_buried[2]["eps_static"] < most_exposed[2]["eps_static"]
    eps = [r[2]["eps_static"] for r in rows]
    assert all(2.0 <= e <= 20.0 for e in eps)


def test_eisenberg_scale_orders_like_kyte_doolittle():
    # Both published scales rank the apolar residues I, V, L, F above the charged R, K, D, E
    # (Eisenberg et al., J. Mol. Biol. 179, 125 (1984); Kyte & Doolittle 1982).
    from siteshift.environment.metrics import EISENBERG
    for apolar in ("ILE", "VAL", "LEU", "PHE"):
        for charged in ("ARG", "LYS", "ASP", "GLU"):
            assert EISENBERG[apolar] > EISENBERG[charged]
            assert KYTE_DOOLITTLE[apolar] > KYTE_DOOLITTLE[charged]
    assert len(EISENBERG) == 20
    pig, pel, env = _site(_shell("apolar"))
    m = site_metrics(pig, pel, env, EnvironmentSettings(hydropathy_scale="eisenberg"))
    assert m["hydropathy_scale"] == "eisenberg" and 1.0 < m["hydropathy"] < 1.4
