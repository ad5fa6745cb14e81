"""The study summary: what a run computed, reused from the QM cache, skipped or failed, and why;
written as a table, as text (printed at the end of every run) and as the report's landing page
(reStructuredText with the key results inline).

May import: base, study (config, tables' outputs are read as files).
"""
from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from ..base import io

SUMMARY_COLUMNS = ["variant", "pigment_id", "ccd_code", "stage", "status", "reason", "time_s",
                   "file"]

#: result files of one site -> stage name
SITE_STAGES = {"excited_states.json": "site (continuum)", "excited_embedded.json":
               "site (embedded)", "ions.json": "ions (IP/EA)"}


#: ⟨S²⟩ above S(S+1) by more than this marks an open-shell state as spin-contaminated (a
#: common rule of thumb for UKS/UHF doublets: 0.75 ideal, above ~0.85 the state mixes in
#: quartet character and its energy is suspect)
SPIN_CONTAMINATION = 0.1


def _ion_warnings(rec: dict) -> list:
    """Warnings of an ion result: spin-contaminated ions (⟨S²⟩ against S(S+1))."""
    out = []
    for name, st in (rec.get("scf") or {}).items():
        s2, two_s = st.get("s_squared") if isinstance(st, dict) else None, st.get("spin", 0)
        if s2 is None:
            continue
        ideal = two_s / 2 * (two_s / 2 + 1)
        if s2 - ideal > SPIN_CONTAMINATION:
            out.append(f"{name} <S^2> {s2:.3f} (ideal {ideal:.3f}): spin-contaminated, its "
                       "IP/EA is suspect")
    return out


def _time(rec: dict):
    t = rec.get("timings_s") or {}
    for k in ("total_s", "total"):
        if k in t:
            return round(float(t[k]), 1)
    if t:   # per-step wall times (scf, response, ...): their sum
        return round(sum(float(v) for v in t.values() if isinstance(v, (int, float))), 1)
    return round(float(rec["time_s"]), 1) if "time_s" in rec else None


def summary_rows(inventories: dict, results: list, codes=()) -> pd.DataFrame:
    """One row per pigment found (inventory: computed, skipped or failed, with the reason) and
    one per QM result file (computed or reused from the QM cache, with its time).

    inventories: variant -> inventory TSV path; results: site result JSON paths (the variant is
    read from each record, else from the path results/<variant>/pigments/<id>/<file>)."""
    rows = []
    for v, path in inventories.items():
        inv = pd.read_csv(path, sep="\t", keep_default_na=False)
        for r in inv.to_dict("records"):
            st, why = r["status"], r.get("problems", "")
            if st == "ok" and codes and r["ccd_code"] not in codes:
                st, why = "skipped", f"{r['ccd_code']} not in pigment_codes"
            elif st == "ok":
                st = "selected"
                if r.get("donors_outside_qm"):      # the inventory's problems say which
                    why = f"warning: {why}"
            elif st == "unsupported":
                st, why = "skipped", why or "not in the pigment library"
            else:
                st = "failed"
            rows.append({"variant": v, "pigment_id": r["pigment_id"], "ccd_code": r["ccd_code"],
                         "stage": "inventory", "status": st, "reason": why, "time_s": None,
                         "file": str(path)})
    for f in results:
        f = Path(f)
        rec = json.loads(f.read_text())
        stage = SITE_STAGES.get(f.name, f.name)
        if f.parent.name == "tuning":
            stage = "ω tuning"
        cache = rec.get("cache", "computed")
        why = "same QM inputs found in the QM cache" if cache == "reused" else ""
        if rec.get("at_bound"):   # a tuned ω at its search bound is a warning for the summary
            why = (f"warning: tuned ω {rec['omega_bohr_inv']:.4f} at the search bound "
                   f"{rec.get('bounds_bohr_inv')}; widen qm.tune.bounds")
        if rec.get("converged") is False:
            why = "warning: not converged"
        spin = _ion_warnings(rec) + [f"band naming: {w}" for w in rec.get("band_warnings") or ()]
        if spin:
            why = "warning: " + "; ".join(spin)
        rows.append({"variant": rec.get("variant") or (f.parts[-4] if len(f.parts) >= 4 else ""),
                     "pigment_id": rec.get("pigment_id") or rec.get("tuned_on", ""),
                     "ccd_code": rec.get("ccd_code", ""), "stage": stage,
                     "status": "reused" if cache == "reused" else "computed",
                     "reason": why,
                     "time_s": _time(rec), "file": str(f)})
    return pd.DataFrame(rows, columns=SUMMARY_COLUMNS)


def summary_text(study: str, reference: str, rows: pd.DataFrame, warnings=()) -> str:
    """The summary printed at the end of a run: counts per stage and status, then every pigment
    that failed or was skipped with its reason, then the study's warnings."""
    variants = sorted(set(rows.variant[rows.stage == "inventory"]), key=lambda v: (v != reference, v))
    sites = rows[(rows.stage == "inventory") & (rows.status == "selected")]
    lines = [f"siteshift study '{study}': {len(variants)} variant(s) ({', '.join(variants)}; "
             f"reference {reference}), {len(sites)} site(s) computed"]
    for stage, grp in rows.groupby("stage", sort=False):
        counts = grp.status.value_counts()
        parts = ", ".join(f"{n} {s}" for s, n in counts.items())
        t = grp[grp.status == "computed"].time_s.dropna()   # reused results cost nothing now
        tt = f"; QM time {t.sum():.0f} s" if stage != "inventory" and len(t) else ""
        lines.append(f"  {stage}: {parts}{tt}")
    bad = rows[rows.status.isin(["failed", "skipped"])]
    if len(bad):
        lines.append("Not computed:")
        for r in bad.itertuples():
            lines.append(f"  {r.variant} {r.pigment_id} ({r.ccd_code}): {r.status}: {r.reason}")
    warned = [f"{r.stage} {r.pigment_id}: {r.reason[len('warning: '):]}"
              for r in rows.itertuples() if str(r.reason).startswith("warning: ")]
    warnings = list(warnings) + warned
    if warnings:
        lines.append("Warnings:")
        lines += [f"  {w}" for w in warnings]
    return "\n".join(lines) + "\n"


def _rst_table(df: pd.DataFrame, title: str) -> str:
    """A docutils list-table (every cell as text, floats to 4 significant figures)."""
    def cell(v):
        if isinstance(v, float):   # meV and 0.1 nm / cm⁻¹ resolution
            return f"{v:.4f}" if abs(v) < 100 else f"{v:.1f}"
        return str(v).replace("\n", " ") or "–"
    out = [f".. list-table:: {title}", "   :header-rows: 1", ""]
    for k, row in enumerate([list(df.columns)] + df.values.tolist()):
        for j, v in enumerate(row):
            out.append(f"   {'* -' if j == 0 else '  -'} {cell(v) if k else v}")
    return "\n".join(out) + "\n"


#: columns of the key tables shown on the landing page (the full tables are in the report's
#: Tables section and under results/tables/)
KEY_COLUMNS = {
    "site_energies.tsv": ("Site energies (eV, nm; ε used per site)",
                          ["variant", "mode", "pigment_id", "band", "energy_ev", "wavelength_nm",
                           "oscillator_strength", "eps_static", "eps_optical"]),
    "branch_shifts.tsv": ("Branch shifts: ΔE = E(a) − E(b)",
                          ["variant", "mode", "pair", "band", "delta_ev", "delta_cm1", "redder",
                           "eps_static_a", "eps_static_b"]),
    "variant_shifts.tsv": ("Variant shifts: ΔE = E(variant) − E(reference)",
                           ["variant", "mode", "reference", "pigment_id", "band", "delta_ev",
                            "delta_cm1", "eps_static_variant", "eps_static_reference"]),
}


def _reference_first(df: pd.DataFrame, reference: str) -> pd.DataFrame:
    if "variant" not in df.columns:
        return df
    order = df.variant.map(lambda v: (v != reference, v))
    return df.iloc[sorted(range(len(df)), key=lambda i: order.iloc[i])]


def summary_rst(text: str, tables_dir, reference: str = "") -> str:
    """The report's landing page body: the summary, then the key tables inline."""
    out = ["Study summary", "-------------", "", "::", ""]
    out += [f"   {line}" for line in text.rstrip().splitlines()] + [""]
    for name, (title, cols) in KEY_COLUMNS.items():
        p = Path(tables_dir) / name
        if not p.exists():
            continue
        df = pd.read_csv(p, sep="\t", keep_default_na=False)
        df = _reference_first(df[[c for c in cols if c in df.columns]], reference)
        out += [_rst_table(df, title), ""]
    return "\n".join(out)


def summary_stage(study, reference, inventories: dict, results: list, tables_dir, out_tsv,
                  out_txt, out_rst, codes=(), warnings=()):
    """Write the summary table, its text and the landing page; return the text."""
    rows = summary_rows(inventories, results, codes)
    io.write_tsv(out_tsv, rows)
    text = summary_text(study, reference, rows, warnings)
    io.atomic_write_text(out_txt, text)
    io.atomic_write_text(out_rst, summary_rst(text, tables_dir, reference))
    return text
