"""Study tables from per-pigment results (synthetic results with known answers)."""
import json

import numpy as np
import pandas as pd
import pytest

from siteshift.base.units import EV2CM1
from siteshift.study.tables import (auto_pairs, branch_shifts, site_energies, spectrum,
                                    variant_shifts)
from siteshift.base.units import NM_EV


def _result(tmp_path, variant, pid, energies, f, h="h"):
    states = [{"index": i + 1, "energy_ev": e, "wavelength_nm": NM_EV / e,
               "oscillator_strength": ff, "transition_dipole_debye": [1.0, 0, 0],
               "transition_dipole_norm_debye": 1.0, "band": None}
              for i, (e, ff) in enumerate(zip(energies, f))]
    bright = min((s for s in states if s["oscillator_strength"] >= 0.01),
                 key=lambda s: s["energy_ev"])
    bright["band"] = "bright"
    r = {"variant": variant, "pigment_id": pid, "ccd_code": "HC4", "states": states,
         "functional": {"alpha": 0.2, "omega_bohr_inv": 0.25}, "eps_static": 4.0,
         "eps_optical": 2.0, "eps_screen": 4.0, "basis": "6-31g",
         "response": {"method": "TDA"}, "solvation": "nonequilibrium", "qm_hash": h}
    p = tmp_path / f"{variant}_{pid}.json"
    p.write_text(json.dumps(r))
    return p


@pytest.fixture
def sites(tmp_path):
    files = [_result(tmp_path, "wt", "A_HC4101", [4.0, 4.3], [0.001, 0.9], "a"),
             _result(tmp_path, "wt", "B_HC4101", [4.1, 4.2], [0.5, 0.1], "b"),
             _result(tmp_path, "mut", "A_HC4101", [3.9, 4.25], [0.002, 0.8], "c"),
             _result(tmp_path, "mut", "B_HC4101", [4.1, 4.2], [0.5, 0.1], "b")]
    return site_energies(files)


def test_site_rows(sites):
    wt_a = sites[(sites.variant == "wt") & (sites.pigment_id == "A_HC4101")]
    assert set(wt_a.band) == {"bright", "S1"}
    assert wt_a[wt_a.band == "bright"].energy_ev.item() == 4.3


def test_branch_shift_values(sites):
    br = branch_shifts(sites, [("pocket", "A_HC4101", "B_HC4101")])
    row = br[(br.variant == "wt") & (br.band == "bright")].iloc[0]
    assert row.delta_ev == pytest.approx(4.3 - 4.1)
    assert row.delta_cm1 == pytest.approx(0.2 * EV2CM1)
    assert row.delta_nm == pytest.approx(NM_EV / 4.3 - NM_EV / 4.1)
    assert row.redder == "B_HC4101"


def test_variant_shifts_and_unchanged_inputs(sites):
    vs = variant_shifts(sites, "wt")
    a = vs[(vs.pigment_id == "A_HC4101") & (vs.band == "bright")].iloc[0]
    assert a.delta_ev == pytest.approx(-0.05) and not a.same_qm_inputs
    b = vs[(vs.pigment_id == "B_HC4101") & (vs.band == "bright")].iloc[0]
    assert b.delta_ev == 0 and b.same_qm_inputs


def test_unmatched_pigment_reported(tmp_path, sites):
    extra = site_energies([_result(tmp_path, "mut", "C_HC4101", [4.0], [0.3])])
    vs = variant_shifts(pd.concat([sites, extra]), "wt")
    assert "only in variant" in set(vs.status)


def test_failed_pigments_are_named_in_the_shift_tables(tmp_path, sites):
    from siteshift.study.tables import inventory_failures
    inv = tmp_path / "inv.tsv"
    pd.DataFrame([{"pigment_id": "B_HC4101", "ccd_code": "HC4", "status": "error",
                   "problems": "core atom(s) C2 missing; rebuild them"}]).to_csv(
        inv, sep="\t", index=False)
    failures = inventory_failures({"mut": inv})
    only_a = sites[~((sites.variant == "mut") & (sites.pigment_id == "B_HC4101"))]
    br = branch_shifts(only_a, [("p", "A_HC4101", "B_HC4101")], failures)
    row = br[br.variant == "mut"].iloc[0]
    assert row.status == "missing b B_HC4101 (failed: core atom(s) C2 missing; rebuild them)"
    vs = variant_shifts(only_a, "wt", failures)
    assert list(vs[vs.pigment_id == "B_HC4101"].status) == [
        "only in reference (failed: core atom(s) C2 missing; rebuild them)"]
    # both partners gone (the variant has no site left): the pair is still reported, both named
    both = only_a[only_a.variant == "wt"]
    failures[("mut", "A_HC4101")] = "failed: core atom(s) O1 missing"
    row = branch_shifts(both, [("p", "A_HC4101", "B_HC4101")], failures).query(
        "variant == 'mut'").iloc[0]
    assert row.status == ("missing a A_HC4101 (failed: core atom(s) O1 missing) and b B_HC4101 "
                          "(failed: core atom(s) C2 missing; rebuild them)")


def test_auto_pairs():
    assert auto_pairs(["A_BCL302", "B_BCL302", "A_BPH401", "M_BPH401", "A_HEM9"]) == [
        ("BCL302:A-B", "A_BCL302", "B_BCL302"), ("BPH401:A-M", "A_BPH401", "M_BPH401")]


def test_spectrum_integrates_to_total_strength():
    grid = np.linspace(0, 10, 20001)
    y = spectrum([3.0, 5.0], [0.4, 0.6], grid, fwhm_ev=0.2)
    assert np.trapezoid(y, grid) == pytest.approx(1.0, rel=1e-6)


def test_plots_are_written(tmp_path, sites):
    from siteshift.study.plots import plot_site_energies, plot_spectra
    tsv = tmp_path / "sites.tsv"
    sites.to_csv(tsv, sep="\t", index=False)
    plot_site_energies(tsv, tmp_path / "s.png", tmp_path / "s.svg")
    files = sorted(tmp_path.glob("wt_*.json")) + sorted(tmp_path.glob("mut_*.json"))
    d = plot_spectra(files, tmp_path / "sp.png", tmp_path / "sp.svg", fwhm_ev=0.1,
                     reference="wt")
    # the nm curve carries the Jacobian |dE/dλ| = hc/λ² (change of variables), so both curves
    # enclose the same area, Σf (the Gaussians are normalised)
    for v, y in d["curves"].items():
        area_ev = np.trapezoid(y, d["grid_ev"])
        assert -np.trapezoid(d["curves_nm"][v], d["nm"]) == pytest.approx(area_ev, rel=1e-4)
    assert list(d["curves"])[0] == "wt"   # the reference first
    assert list(d["differences"]) == ["mut"]
    assert np.allclose(d["differences"]["mut"], d["curves"]["mut"] - d["curves"]["wt"])
    for f in ("s.png", "s.svg", "sp.png", "sp.svg"):
        assert (tmp_path / f).stat().st_size > 1000
    assert (tmp_path / "sp.png").read_bytes()[:4] == b"\x89PNG"


def test_eps_for_target_interpolates_with_bracket():
    from siteshift.study.tables import eps_for_target
    rows = []
    for eps, ea, eb in ((2.0, 4.00, 4.10), (4.0, 4.00, 4.05), (8.0, 4.00, 3.98)):
        rows += [{"variant": "wt", "band": "Qy", "pigment_id": "A", "eps_static": eps,
                  "energy_ev": ea},
                 {"variant": "wt", "band": "Qy", "pigment_id": "B", "eps_static": eps,
                  "energy_ev": eb}]
    df = pd.DataFrame(rows)
    t = {"name": "t", "kind": "branch", "pair": "p", "variant": "wt", "band": "Qy",
         "value_ev": 0.0}
    r = eps_for_target(df, t, {"p": ("A", "B")})
    # ΔE(4) = −0.05, ΔE(8) = +0.02: zero at 4 + 4·0.05/0.07
    assert r["status"] == "ok" and (r["bracket_low"], r["bracket_high"]) == (4.0, 8.0)
    assert r["eps_static"] == pytest.approx(4 + 4 * 0.05 / 0.07)
    r = eps_for_target(df, {**t, "value_ev": 1.0}, {"p": ("A", "B")})
    assert r["eps_static"] is None and "not bracketed" in r["status"]
    flat = eps_for_target(df, {**t, "kind": "site", "pigment": "A", "value_ev": 4.0},
                          {"p": ("A", "B")})
    assert flat["eps_static"] is None and "does not depend" in flat["status"]
    r = eps_for_target(df, {**t, "kind": "site", "pigment": "B", "value_ev": 4.0},
                       {"p": ("A", "B")})
    assert r["bracket_low"] == 4.0 and r["eps_static"] == pytest.approx(4 + 4 * 0.05 / 0.07)


def test_single_variant_study_gives_empty_but_typed_tables(tmp_path):
    from siteshift.study.plots import plot_variant_shifts
    from siteshift.base.io import write_tsv
    sites = site_energies([_result(tmp_path, "wt", "A_HC4101", [4.0, 4.3], [0.001, 0.9])])
    vs = variant_shifts(sites, "wt")
    br = branch_shifts(sites, [])
    assert vs.empty and "delta_ev" in vs.columns and "delta_ev" in br.columns
    write_tsv(tmp_path / "vs.tsv", vs)
    plot_variant_shifts(tmp_path / "vs.tsv", tmp_path / "vs.png")
    assert (tmp_path / "vs.png").stat().st_size > 1000


def test_study_summary_counts_and_reasons(tmp_path):
    from siteshift.study.summary import summary_rows, summary_rst, summary_text
    inv = tmp_path / "inv.tsv"
    pd.DataFrame([
        {"pigment_id": "A_HC4101", "ccd_code": "HC4", "status": "ok", "problems": ""},
        {"pigment_id": "B_HC4101", "ccd_code": "HC4", "status": "error",
         "problems": "core atom(s) C2 missing"},
        {"pigment_id": "A_FMN201", "ccd_code": "FMN", "status": "ok", "problems": ""},
        {"pigment_id": "A_SO4301", "ccd_code": "SO4", "status": "unsupported", "problems": ""},
    ]).to_csv(inv, sep="\t", index=False)
    site = tmp_path / "wt/pigments/A_HC4101/excited_states.json"
    site.parent.mkdir(parents=True)
    site.write_text(json.dumps({"variant": "wt", "pigment_id": "A_HC4101", "ccd_code": "HC4",
                                "cache": "reused", "timings_s": {"scf": 10.0, "response": 2.5}}))
    tune = tmp_path / "tuning/HC4.json"
    tune.parent.mkdir()
    tune.write_text(json.dumps({"ccd_code": "HC4", "tuned_on": "A_HC4101", "time_s": 30.0,
                                "at_bound": True, "omega_bohr_inv": 0.5,
                                "bounds_bohr_inv": [0.1, 0.5]}))
    # an ion whose <S^2> is far above S(S+1) = 0.75 (doublet; common practice) is flagged
    ions = tmp_path / "wt/pigments/A_HC4101/ions.json"
    ions.write_text(json.dumps({"variant": "wt", "pigment_id": "A_HC4101", "ccd_code": "HC4",
                                "scf": {"neutral": {"spin": 0, "s_squared": None},
                                        "cation": {"spin": 1, "s_squared": 0.7712},
                                        "anion": {"spin": 1, "s_squared": 0.9831}}}))
    rows = summary_rows({"wt": inv}, [site, tune, ions], codes={"HC4"})
    st = dict(zip(rows.pigment_id + "/" + rows.stage, rows.status))
    assert st == {"A_HC4101/inventory": "selected", "B_HC4101/inventory": "failed",
                  "A_FMN201/inventory": "skipped", "A_SO4301/inventory": "skipped",
                  "A_HC4101/site (continuum)": "reused", "A_HC4101/ω tuning": "computed",
                  "A_HC4101/ions (IP/EA)": "computed"}
    why = rows[rows.stage == "ions (IP/EA)"].reason.iloc[0]
    assert "anion <S^2> 0.983 (ideal 0.750)" in why and "cation" not in why
    assert rows[rows.stage == "site (continuum)"].time_s.iloc[0] == 12.5
    text = summary_text("demo", "wt", rows, ["config key 'x': y"])
    assert "1 site(s) computed" in text and "site (continuum): 1 reused\n" in text
    assert "wt B_HC4101 (HC4): failed: core atom(s) C2 missing" in text
    assert "FMN not in pigment_codes" in text and "not in the pigment library" in text
    assert "tuned ω 0.5000 at the search bound" in text and "config key 'x': y" in text
    assert "ions (IP/EA) A_HC4101: anion <S^2> 0.983" in text
    # the landing page is valid reStructuredText (docutils renders it without errors)
    from docutils.core import publish_parts
    html = publish_parts(summary_rst(text, tmp_path), writer_name="html",
                         settings_overrides={"report_level": 2, "halt_level": 2})["html_body"]
    assert "Study summary" in html
