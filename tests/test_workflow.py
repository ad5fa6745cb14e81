"""End to end: the whole Snakemake DAG on a tiny study in a temporary directory."""
import json
import shutil
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
import yaml


def _tiny_config(root, **qm):
    cfg = yaml.safe_load((root / "config/config.yaml").read_text())
    cfg["variants"] = {
        "wt": {"structure": str(root / "config/demo/pcd2_wt.pdb")},
        "A_I6E": {"structure": str(root / "config/demo/pcd2_A_I6E.pdb"), "parent": "wt"},
    }
    cfg["qm"].update({"preset": "demo", "basis": "sto-3g", "grid_level": 0, "lebedev_order": 5,
                      "nstates": 2, "omega": 0.25, **qm})
    cfg["electrostatics"]["scan"].update({"mutations": ["A:I6E"], "radius_A": 0.0})
    cfg["couplings"]["dimers"] = [["pocket-pair", "A_HC4101", "B_HC4101"]]
    return cfg


def _snakemake(root, workdir, *args):
    cmd = [sys.executable, "-m", "snakemake", "-s", str(root / "Snakefile"), "--directory",
           str(workdir), "--cores", "2", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=1500)


@pytest.fixture(scope="module")
def study(root, tmp_path_factory):
    work = tmp_path_factory.mktemp("study")
    (work / "config").mkdir()
    cfg = _tiny_config(root)
    cfg["sweep"] = {"enabled": True, "eps_static": [2.0, 8.0], "n2": 2.0,
                    "measure_cold_start": True,
                    "pigments": ["A_HC4101", "B_HC4101"],
                    "targets": [{"name": "split", "kind": "branch", "pair": "HC4-pocket",
                                 "variant": "wt", "band": "S1", "value_ev": 0.0},
                                {"name": "pair-split", "kind": "dimer_splitting",
                                 "dimer": "pocket-pair", "variant": "wt", "value_ev": 0.001}]}
    (work / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    p = _snakemake(root, work)
    assert p.returncode == 0, p.stderr[-4000:]
    return work


def test_dry_run_and_lint(root, tmp_path):
    (tmp_path / "config").mkdir()
    (tmp_path / "config/config.yaml").write_text(yaml.safe_dump(_tiny_config(root)))
    p = _snakemake(root, tmp_path, "-n")
    assert p.returncode == 0, p.stderr[-3000:]
    p = _snakemake(root, tmp_path, "--lint")
    assert "error" not in (p.stdout + p.stderr).lower() or p.returncode == 0, p.stdout[-3000:]


def test_users_configfile_replaces_the_demo_config(root, tmp_path):
    # Snakemake merges --configfile into a Snakefile's `configfile:`; a user's study must not
    # inherit the demo's variants (the workflow loads the demo config only without --configfile)
    (tmp_path / "config").mkdir()
    (tmp_path / "config/config.yaml").write_text(yaml.safe_dump(_tiny_config(root)))
    mine = _tiny_config(root)
    mine["variants"] = {"mine": {"structure": str(root / "config/demo/pcd2_wt.pdb")}}
    mine["reference"] = "mine"
    (tmp_path / "my.yaml").write_text(yaml.safe_dump(mine))
    p = _snakemake(root, tmp_path, "inventories", "-n", "--forceall", "--configfile",
                   str(tmp_path / "my.yaml"))
    assert p.returncode == 0, p.stderr[-3000:]
    assert "results/mine/inventory.tsv" in p.stdout
    assert "results/wt/" not in p.stdout and "A_I6E" not in p.stdout


def test_job_error_is_one_line_naming_the_key(root, tmp_path):
    # an override's eps_optical above the site's computed eps_static can only be found in the
    # job: its log ends with the message naming the config key, not a traceback
    cfg = _tiny_config(root)
    cfg["dielectric"]["overrides"] = {"A_HC4101": {"eps_optical": 50.0}}
    (tmp_path / "config").mkdir()
    (tmp_path / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    p = _snakemake(root, tmp_path, "results/wt/pigments/A_HC4101/environment.json")
    assert p.returncode != 0
    log = (tmp_path / "logs/measure_environment/wt/A_HC4101.log").read_text()
    assert "ERROR config key 'dielectric.overrides.A_HC4101.eps_optical': 50 is above" in log
    assert "Traceback" not in log and "Traceback" not in p.stderr
    assert not (tmp_path / "results/wt/pigments/A_HC4101/environment.json").exists()


def test_unknown_pigment_in_config_stops_before_qm(root, tmp_path):
    cfg = _tiny_config(root)
    cfg["branches"]["pairs"].append(["ghost", "A_HC4101", "C_HC4101"])
    (tmp_path / "config").mkdir()
    (tmp_path / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    p = _snakemake(root, tmp_path)
    assert p.returncode != 0
    assert "config key 'branches.pairs[1]': pigment 'C_HC4101' is in no" in p.stdout + p.stderr
    assert not (tmp_path / "logs/excite_pigment").exists()


def test_bad_config_stops_before_jobs(root, tmp_path):
    cfg = _tiny_config(root)
    cfg["dielectric"]["mode"] = "sometimes"
    (tmp_path / "config").mkdir()
    (tmp_path / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    p = _snakemake(root, tmp_path, "-n")
    assert p.returncode != 0
    out = p.stdout + p.stderr
    assert "sometimes" in out and "mode" in out
    assert not (tmp_path / "results").exists()


def test_tables_have_sensible_contents(study):
    sites = pd.read_csv(study / "results/tables/site_energies.tsv", sep="\t")
    sites = sites[sites["mode"] == "continuum"]   # embedded rows: test_electrostatics_outputs
    assert set(sites.variant) == {"wt", "A_I6E"}
    assert set(sites.pigment_id) == {"A_HC4101", "B_HC4101"}
    # HC4 (neutral p-coumaric acid) absorbs in the UV; STO-3G puts the bright π→π* high, so the
    # bound here is the broad 3–7 eV window (our own sanity range for a minimal basis)
    assert sites.energy_ev.between(3.0, 7.0).all()
    assert (sites.oscillator_strength >= 0).all()
    env = pd.read_csv(study / "results/tables/environment.tsv", sep="\t")
    wt = env[env.variant == "wt"].set_index("pigment_id")
    # the polar pocket (chain B: Asn/Gln/Glu + waters) is screened more than the apolar one
    assert wt.loc["B_HC4101", "eps_static"] > wt.loc["A_HC4101", "eps_static"]
    assert (env.eps_optical <= env.eps_static).all()
    br = pd.read_csv(study / "results/tables/branch_shifts.tsv", sep="\t")
    row = br[(br.variant == "wt") & (br.band == "S1")].iloc[0]
    assert row.delta_ev != 0 and abs(row.delta_ev) < 1.0
    vs = pd.read_csv(study / "results/tables/variant_shifts.tsv", sep="\t")
    vs = vs[vs["mode"] == "continuum"]   # embedded rows: see test_electrostatics_outputs
    b = vs[(vs.pigment_id == "B_HC4101")]
    a = vs[(vs.pigment_id == "A_HC4101")]
    assert b.same_qm_inputs.all() and (b.delta_ev == 0).all()
    assert not a.same_qm_inputs.any() and (a.delta_ev != 0).all()


def test_study_summary_and_report(root, study):
    # every run ends with the summary; the report's landing page carries the study's title, the
    # summary and the key tables inline
    text = (study / "results/summary.txt").read_text()
    assert text.startswith("siteshift study 'pcd2-demo': 2 variant(s) (wt, A_I6E; reference wt)")
    # B_HC4101 is untouched by the mutation: its QM result is reused from the cache
    assert "site (continuum): 3 computed, 1 reused" in text
    rows = pd.read_csv(study / "results/tables/study_summary.tsv", sep="\t")
    inv = rows[rows.stage == "inventory"]
    assert len(inv) == 4 and set(inv.status) == {"selected"}
    # the study's inventory table: both variants, every check's column (the demo's pockets have
    # no altlocs, rebuilt atoms, metal or assembly records; closest contacts 3.0-3.4 Å)
    table = pd.read_csv(study / "results/tables/inventory.tsv", sep="\t", keep_default_na=False)
    assert sorted(table.variant) == ["A_I6E", "A_I6E", "wt", "wt"]
    assert (table.status == "ok").all() and (table.formula_qm == "C9H8O3").all()
    assert table.min_contact_A.astype(float).between(2.5, 4.0).all()
    site = rows[rows.stage == "site (continuum)"]
    assert len(site) == 4 and (site.time_s > 0).all()
    p = _snakemake(root, study, "--report", "results/report.html")
    assert p.returncode == 0, p.stderr[-3000:]
    html = (study / "results/report.html").read_text()
    assert "Study pcd2-demo" in html and "Branch shifts" in html and "HC4-pocket" in html
    assert not (study / "report.html").exists()


def test_outputs_for_inspection(study):
    pig = study / "results/wt/pigments/A_HC4101"
    xyz = (pig / "qm_model.xyz").read_text().splitlines()
    assert int(xyz[0]) == 20 and "formula=C9H8O3" in xyz[1]
    cluster = (pig / "cluster.pdb").read_text()
    assert "HC4" in cluster and "PHE" in cluster
    assert (study / "results/plots/spectrum.png").stat().st_size > 1000
    logs = list((study / "logs").rglob("*.log"))
    assert any("excite_pigment" in str(p) for p in logs)
    # the unchanged pigment was computed once and reused for the mutant
    import json
    m = json.loads((study / "results/A_I6E/pigments/B_HC4101/excited_states.json").read_text())
    w = json.loads((study / "results/wt/pigments/B_HC4101/excited_states.json").read_text())
    assert m["qm_hash"] == w["qm_hash"]
    assert {m["cache"], w["cache"]} == {"computed", "reused"}
    # qm.warm_start: reference — the mutant's site started from the reference's same site
    # (ω is fixed here, so the reference's own sites had no tuning orbitals and started cold)
    a = json.loads((study / "results/A_I6E/pigments/A_HC4101/excited_states.json").read_text())
    assert a["scf_start"]["kind"] == "warm" and "of variant wt" in a["scf_start"]["source"]
    r = json.loads((study / "results/wt/pigments/A_HC4101/excited_states.json").read_text())
    assert r["scf_start"]["kind"] == "cold" and "no saved orbitals" in r["scf_start"]["reason"]
    assert a["scf_cycles"] < r["scf_cycles"]


def test_electrostatics_outputs(study):
    el = pd.read_csv(study / "results/tables/electrostatics.tsv", sep="\t")
    assert set(el.variant) == {"wt", "A_I6E"} and set(el.pigment_id) == {"A_HC4101", "B_HC4101"}
    # first order (relaxed difference density) tracks the embedded calculation's own shift
    assert (el.first_order_minus_full_mev.abs() <= 0.2 * el.shift_full_mev.abs() + 2.0).all()
    # the mutant's glutamate is the top contributor to its pocket's pigment
    mut = el[(el.variant == "A_I6E") & (el.pigment_id == "A_HC4101")]
    assert (mut.top_residue == "A:GLU6").all()
    res = pd.read_csv(study / "results/tables/residue_contributions.tsv", sep="\t")
    assert {"shift_mev", "shift_cm1", "min_distance_A"} <= set(res.columns)
    sites = pd.read_csv(study / "results/tables/site_energies.tsv", sep="\t")
    assert set(sites["mode"]) == {"continuum", "embedded"}
    br = pd.read_csv(study / "results/tables/branch_residues.tsv", sep="\t")
    # chain A's Ile6 is matched with chain B's Asn6 by the alignment
    assert ((br.residue_a == "A:ILE6") & (br.residue_b == "B:ASN6")).any()
    scan = pd.read_csv(study / "results/tables/mutation_scan.tsv", sep="\t")
    row = scan[(scan.pigment_id == "A_HC4101") & (scan.mutation == "A:I6E")].iloc[0]
    assert row.status == "ok" and row.residue_after_mev != row.residue_before_mev
    var = scan[(scan.kind == "variant") & (scan.mutation == "A_I6E")]
    assert var.computed_embedded_mev.notna().all()
    prot = pd.read_csv(study / "results/tables/protonation.tsv", sep="\t")
    assert set(prot.variant) == {"wt", "A_I6E"} and (prot.kind == "pigment").any()
    assert (study / "results/plots/residue_contributions.png").stat().st_size > 1000
    # the embedded SCF started from the continuum-only ground state of the same site
    import json
    for v in ("wt", "A_I6E"):
        emb = json.loads((study / f"results/{v}/pigments/A_HC4101/excited_embedded.json")
                         .read_text())
        assert emb["scf_start"]["kind"] == "warm"
        assert "continuum-only result of this site" in emb["scf_start"]["source"]


def test_coupling_outputs(study):
    # the two pocket pigments couple (23 Å apart): three routes, exciton states, spectra
    c = pd.read_csv(study / "results/tables/couplings.tsv", sep="\t")
    assert set(c.variant) == {"wt", "A_I6E"} and len(c) == 2
    assert (c.distance_A.between(20.0, 27.0)).all()
    assert (c.screening_factor == 0.5).all()       # optical screening, n² = 2 at both sites
    # far apart, the transition-density and point-dipole routes agree in sign and size
    assert (np.sign(c.j_tdc_cm1) == np.sign(c.j_dipole_cm1)).all()
    assert (abs(c.j_tdc_cm1 - c.j_dipole_cm1) <= 0.15 * c.j_dipole_cm1.abs() + 0.5).all()
    st = pd.read_csv(study / "results/tables/exciton_states.tsv", sep="\t")
    assert set(st.group) == {"all"} and len(st) == 4
    for _v, g in st.groupby("variant"):
        assert g.participation_ratio.between(1.0, 2.0).all()
        rot = g.rotational_strength_DmuB
        assert abs(rot.sum()) < 1e-6 + 1e-6 * rot.abs().sum()
    sp = pd.read_csv(study / "results/tables/exciton_spectra.tsv", sep="\t")
    assert {"wavelength_nm", "wavenumber_cm1", "absorption_D2_per_ev", "cd_DmuB_per_ev",
            "epsilon_M1cm1", "delta_epsilon_M1cm1"} <= set(sp.columns)
    # ε and Δε (M⁻¹ cm⁻¹) are the densities times E over the band-integral constants
    # (D = 9.186e-3 ∫ε/ν̃ dν̃, R = 0.2476 ∫Δε/ν̃ dν̃; common practice)
    assert np.allclose(sp.epsilon_M1cm1, sp.energy_ev * sp.absorption_D2_per_ev / 9.186e-3,
                       rtol=1e-3, atol=1e-6)
    assert np.allclose(sp.delta_epsilon_M1cm1, sp.energy_ev * sp.cd_DmuB_per_ev / 0.24763,
                       rtol=1e-3, atol=1e-6)
    # the couplings table keeps the computed dipoles and unscaled couplings (HC4 has no
    # measured dipole strength in the library: the two are equal)
    assert np.allclose(c.mu_a_debye, c.mu_a_computed_debye)
    assert np.allclose(c.j_tdc_cm1, c.j_tdc_unscaled_cm1)
    for name in ("couplings", "exciton_states", "exciton_spectra"):
        assert (study / f"results/plots/{name}.png").stat().st_size > 1000
    assert (study / "results/wt/pigments/A_HC4101/transitions.npz").exists()
    # the pair computed whole: its exciton pair is two local excitations shared by the two
    # pigments, split no more than the unscreened coupling model says (the shared continuum
    # screens it)
    d = pd.read_csv(study / "results/tables/dimers.tsv", sep="\t")
    assert set(d.variant) == {"wt", "A_I6E"} and (d.dimer == "pocket-pair").all()
    assert (d.pair_weight_min > 0.8).all()
    assert (d[["charge_transfer_lower", "charge_transfer_upper"]] < 0.05).all().all()
    assert (d.splitting_cm1 > 0).all()
    assert (d.splitting_cm1 <= 1.2 * d.model_splitting_cm1 + 5.0).all()
    # the pair's rotational strengths, supermolecular and from the exciton model, are reported
    assert d[["rot_lower_DmuB", "rot_upper_DmuB", "model_rot_lower_DmuB",
              "model_rot_upper_DmuB"]].notna().all().all()
    # the dimer's SCF started from its monomers' orbitals; over the sweep, the monomers of the
    # second point from the first point's
    import json
    dj = json.loads((study / "results/wt/dimers/pocket-pair.json").read_text())
    assert dj["dimer_result"]["scf_start"]["kind"] == "warm"
    assert "monomers" in dj["dimer_result"]["scf_start"]["source"]
    sw = json.loads((study / "results/wt/dimers/pocket-pair.eps_sweep.json").read_text())
    assert [p["scf_start"] for p in sw["points"]] == ["warm", "warm"]


def test_ion_outputs(study):
    # the demo's two directions of charge separation between the pocket pigments (23 Å)
    sites = pd.read_csv(study / "results/tables/ion_sites.tsv", sep="\t")
    assert len(sites) == 4 and (sites["mode"] == "embedded").all()
    assert (sites.gap_deltascf_ev > 0).all() and sites.s2_cation.between(0.74, 0.9).all()
    pairs = pd.read_csv(study / "results/tables/ion_pairs.tsv", sep="\t")
    assert set(pairs.pair) == {"A-to-B", "B-to-A"} and set(pairs.variant) == {"wt", "A_I6E"}
    # Weller form: E = IP_D − EA_A + V/ε_c with V ≈ −e²/(4πε₀ R) for two unit charges
    # 20–27 Å apart (Coulomb's law), ε_c the mean static ε of the two sites
    assert np.allclose(pairs.energy_ev, pairs.ip_donor_ev - pairs.ea_acceptor_ev
                       + pairs.coulomb_vacuum_ev / pairs.eps_coulomb)
    assert (-pairs.coulomb_vacuum_ev).between(14.4 / 27.0, 14.4 / 20.0).all()
    # the dimer of the same two pigments is listed with its charge-transfer search
    assert "dimer_ct_state" in pairs
    br = pd.read_csv(study / "results/tables/ion_branches.tsv", sep="\t")
    assert len(br) == 2 and set(br.step_a) == {"A-to-B"} and set(br.step_b) == {"B-to-A"}
    assert np.allclose(br.delta_ev, br.energy_a_ev - br.energy_b_ev, atol=2e-5)  # TSV digits
    gaps = pd.read_csv(study / "results/tables/gaps.tsv", sep="\t")
    assert set(gaps.functional) == {"screened", "unscreened"} and gaps.site_eps.any()
    # each point of the gap check after the first starts from the one before (neutral and ions)
    import json
    starts = [json.loads((study / f"results/qm_cache/{h}.ions.json").read_text())["scf"]
              for h in dict.fromkeys(gaps.qm_hash)]
    assert len(starts) >= 3 and all(s["neutral"]["start"]["source"] == "the previous point"
                                    and s["cation"]["start"]["source"] == "given"
                                    for s in starts[1:])
    g1 = gaps[gaps.eps_static == 1.0].set_index("functional")
    assert g1.loc["screened", "gap_orbital_ev"] == g1.loc["unscreened", "gap_orbital_ev"]
    for name in ("ion_ladder", "gaps"):
        assert (study / f"results/plots/{name}.png").stat().st_size > 1000


def test_eps_sweep_outputs(study):
    sw = pd.read_csv(study / "results/tables/eps_sweep.tsv", sep="\t")
    # the dimer computed whole is swept too: its splitting against ε (couplings.dimers)
    dim = sw[sw.band == "dimer_splitting"]
    assert set(dim.pigment_id) == {"pocket-pair"} and set(dim.eps_static) == {2.0, 8.0}
    assert (dim.energy_ev > 0).all() and set(dim.variant) == {"wt", "A_I6E"}
    sw = sw[sw.band != "dimer_splitting"]
    # with the ion stage on, IP and EA of every swept pigment and the configured ion pairs;
    # two copies of one pigment in a uniform continuum have one IP (to SCF scatter), and the
    # ion pair follows IP − EA + V/ε with V ≈ −e²/(4πε₀R), R 20–27 Å (Coulomb's law)
    ions = sw[sw.band.isin(["IP", "EA", "ion_pair"])]
    sw = sw[~sw.band.isin(["IP", "EA", "ion_pair"])]
    assert len(ions[ions.band == "IP"]) == 8 and len(ions[ions.band == "ion_pair"]) == 8
    ip = ions[(ions.band == "IP") & (ions.variant == "wt")].pivot(
        index="eps_static", columns="pigment_id", values="energy_ev")
    assert np.allclose(ip["A_HC4101"], ip["B_HC4101"], atol=1e-4)
    ea = ions[(ions.band == "EA") & (ions.variant == "wt")].pivot(
        index="eps_static", columns="pigment_id", values="energy_ev")
    ab = ions[(ions.pigment_id == "A-to-B") & (ions.variant == "wt")].set_index("eps_static")
    v = (ab.energy_ev - ip["A_HC4101"] + ea["B_HC4101"]) * ab.index
    assert (-v).between(14.4 / 27.0, 14.4 / 20.0).all()
    assert ip["A_HC4101"][8.0] < ip["A_HC4101"][2.0]   # the cation is solvated more at ε 8
    assert set(sw.eps_static) == {2.0, 8.0}
    assert set(sw.variant) == {"wt", "A_I6E"}
    s1 = sw[(sw.band == "S1") & (sw.variant == "wt") & (sw.pigment_id == "A_HC4101")]
    assert s1.energy_ev.notna().all() and len(s1) == 2
    second = sw[sw.computed_as == 2].iloc[0]
    assert second.scf_cycles_cold > 0 and second.scf_cycles <= second.scf_cycles_cold
    # anchored on the site calculation (sweep.anchor_on_site, default): the first point (ε 2)
    # starts from the site density, the second from the line through the site and ε 2
    assert set(sw.computed_as) == {1, 2}
    assert set(sw[sw.computed_as == 1].scf_guess) == {"previous"}
    assert set(sw[sw.computed_as == 2].scf_guess) == {"extrapolated"}
    assert set(sw[sw.computed_as == 1].eps_static) == {2.0}
    tg = pd.read_csv(study / "results/tables/eps_targets.tsv", sep="\t")
    # the two pockets hold exact two-fold copies of the pigment, and in a uniform continuum
    # nothing else distinguishes them: their splitting cannot depend on ε
    assert tg.iloc[0].status.startswith("computed value does not depend on ε")
    pair = tg[tg.kind == "dimer_splitting"].iloc[0]
    assert pair.band == "dimer_splitting" and pair.eps_min_scanned == 2.0
    assert pair.status in ("ok", "not bracketed by the scanned ε range") or \
        pair.status.startswith("computed value does not depend")
    a = sw[(sw.pigment_id == "A_HC4101") & (sw.variant == "wt") & (sw.band == "S1")]
    b = sw[(sw.pigment_id == "B_HC4101") & (sw.variant == "wt") & (sw.band == "S1")]
    # (to the convergence tolerances: the two sweeps start from different site densities, and
    # default-converged SCF runs from different starts differ by ~3e-5 eV in the excitations)
    assert abs(a.energy_ev.values - b.energy_ev.values).max() < 1e-4
    assert (study / "results/plots/eps_sweep.png").exists()


def _planned(p):
    """{rule: count} from the 'Job stats' table of a dry run."""
    counts, inside = {}, False
    for line in p.stdout.splitlines():
        if line.startswith("Job stats"):
            inside = True
            continue
        if inside:
            parts = line.split()
            if len(parts) == 2 and parts[1].isdigit() and parts[0] != "total":
                counts[parts[0]] = int(parts[1])
            elif parts and parts[0] == "total":
                break
    return counts


@pytest.fixture
def study_copy(study, tmp_path):
    work = tmp_path / "copy"
    shutil.copytree(study, work, symlinks=True)
    return work


def test_qm_parameter_change_reruns_only_qm_and_after(root, study_copy):
    cfg = yaml.safe_load((study_copy / "config/config.yaml").read_text())
    assert _planned(_snakemake(root, study_copy, "-n")) == {}
    # run-only keys (how a job runs, not its numbers) rerun nothing
    cfg["qm"].update(threads=2, max_memory_mb=3000)
    (study_copy / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    assert _planned(_snakemake(root, study_copy, "-n")) == {}
    cfg["qm"]["alpha"] = 0.25
    (study_copy / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    jobs = _planned(_snakemake(root, study_copy, "-n"))
    assert jobs.get("excite_pigment") == 4 and jobs.get("sweep_epsilon") == 4
    assert jobs.get("tabulate_shifts") == 1 and jobs.get("plot_study") == 1
    for upstream in ("take_inventory", "extract_pigment", "measure_environment",
                     "tabulate_environment"):
        assert upstream not in jobs, jobs


def test_tuning_is_not_redone_for_continuum_or_run_only_keys(root, tmp_path):
    # ω tuning is a gas-phase ground-state job: PCM method, threads and memory leave it alone
    cfg = _tiny_config(root, omega=None, grid_level=0)
    cfg["qm"]["tune"].update(xatol=0.05, bounds=[0.24, 0.26])   # two or three evaluations
    (tmp_path / "config").mkdir()
    (tmp_path / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    p = _snakemake(root, tmp_path, "results/tuning/HC4.json")
    assert p.returncode == 0, p.stderr[-3000:]
    # the neutral's orbitals at the tuned ω are kept for the sites' warm starts
    with np.load(tmp_path / "results/tuning/HC4.orbitals.npz") as z:
        assert "A_HC4101" in str(z["source"]) and str(z["basis"]) == "sto-3g"
        assert z["coords_A"].shape == (len(z["elements"]), 3) == (20, 3)
        assert z["mo_coeff"].shape[1] == z["mo_occ"].shape[0] and z["mo_occ"].sum() == 86  # C9H8O3
    cfg["qm"].update(pcm_method="C-PCM", threads=2, max_memory_mb=3000, tda=False)
    (tmp_path / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    assert _planned(_snakemake(root, tmp_path, "-n", "results/tuning/HC4.json")) == {}
    cfg["qm"]["alpha"] = 0.3   # changes the functional: tuned again
    (tmp_path / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    assert _planned(_snakemake(root, tmp_path, "-n", "results/tuning/HC4.json")) == {
        "tune_omega": 1}


def test_added_mutant_reuses_unchanged_qm(root, study_copy):
    cfg = yaml.safe_load((study_copy / "config/config.yaml").read_text())
    cfg["variants"]["A_I6E_bis"] = {"structure": str(root / "config/demo/pcd2_A_I6E.pdb"),
                                    "parent": "wt"}
    cfg["sweep"]["enabled"] = False
    (study_copy / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    jobs = _planned(_snakemake(root, study_copy, "-n"))
    # before the new inventory exists, only it and the study tables are planned
    assert jobs.get("take_inventory") == 1 and "excite_pigment" not in jobs, jobs
    p = _snakemake(root, study_copy)
    assert p.returncode == 0, p.stderr[-3000:]
    ran = p.stdout + p.stderr
    # after the checkpoint: the new variant's two pigments, and no job of the old variants
    assert ran.count("(Rule: excite_pigment)") == 2
    assert ran.count("(Rule: extract_pigment)") == 2
    import json
    for pid in ("A_HC4101", "B_HC4101"):
        r = json.loads((study_copy / f"results/A_I6E_bis/pigments/{pid}/excited_states.json")
                       .read_text())
        assert r["cache"] == "reused"
        log = (study_copy / f"logs/excite_pigment/A_I6E_bis/{pid}.log").read_text()
        assert "reusing" in log and "SCF converged" not in log


def test_in_silico_mutant_variant(root, tmp_path):
    cfg = _tiny_config(root)
    cfg["variants"] = {"wt": cfg["variants"]["wt"],
                       "fx": {"parent": "wt", "mutations": ["A:I6E"]}}
    (tmp_path / "config").mkdir()
    (tmp_path / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    p = _snakemake(root, tmp_path, "results/fx/inventory.tsv")
    assert p.returncode == 0, p.stderr[-3000:]
    assert "(Rule: mutate_structure)" in p.stdout + p.stderr
    inv = pd.read_csv(tmp_path / "results/fx/inventory.tsv", sep="\t")
    assert list(inv.pigment_id) == ["A_HC4101", "B_HC4101"]
    assert "GLU A   6" in (tmp_path / "results/fx/structure.pdb").read_text()


def test_geometry_modes_in_the_workflow(root, tmp_path):
    # extract.geometry at the demo preset (tiny basis): type_reference optimises one HC4 model
    # (the reference's first copy, GFN2-xTB) and places it on both copies of both variants, so
    # the wild type's and the mutant's chain-B site share their QM inputs; relaxed optimises
    # a copy with its heavy atoms restrained. Each site reports its geometry and RMSD.
    cfg = _tiny_config(root)
    cfg["extract"]["geometry"] = "type_reference"
    (tmp_path / "config").mkdir()
    (tmp_path / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    sites = [f"results/{v}/pigments/{p}/excited_states.json" for v in ("wt", "A_I6E")
             for p in ("A_HC4101", "B_HC4101")]
    p = _snakemake(root, tmp_path, *sites)
    assert p.returncode == 0, p.stderr[-3000:]
    ref = json.loads((tmp_path / "results/geometry/HC4.json").read_text())
    assert ref["pigment_id"] == "A_HC4101" and ref["optimisation"]["converged"]
    recs = {s: json.loads((tmp_path / s).read_text()) for s in sites}
    for r in recs.values():
        assert r["geometry"]["mode"] == "type_reference"
        assert 0.0 < r["geometry"]["rmsd_heavy_A"] < 0.5
    models = [json.loads((tmp_path / f"results/{v}/pigments/B_HC4101/qm_model.json")
                         .read_text()) for v in ("wt", "A_I6E")]
    assert models[0]["coords_A"] == models[1]["coords_A"]
    assert recs[sites[1]]["qm_hash"] == recs[sites[3]]["qm_hash"]
    assert (tmp_path / "results/wt/pigments/A_HC4101/crystal_model.json").exists()
    cfg["extract"]["geometry"] = "relaxed"
    (tmp_path / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    p = _snakemake(root, tmp_path, "results/wt/pigments/A_HC4101/qm_model.json")
    assert p.returncode == 0, p.stderr[-3000:]
    rec = json.loads((tmp_path / "results/wt/pigments/A_HC4101/qm_model.json").read_text())
    g = rec["geometry"]
    assert g["mode"] == "relaxed" and g["optimisation"]["converged"]
    assert g["optimisation"]["restraint_kcal_mol_A2"] == 10.0
    assert 0.0 < g["rmsd_heavy_A"] < 0.3
