"""Tables of the electrostatics stage: per-site embedded vs continuum-only energies, residue
contributions, the residues behind each branch difference, the mutation scan beside the
computed variant shifts, the protonation choices; and the stage that writes them."""
from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from ..base import io
from ..base.defaults import default
from ..base.units import EV2CM1
from ..structures.reading import AMINO_ACIDS as AMINO_ACIDS_SET
from .mutation_scan import SCAN_COLUMNS

log = logging.getLogger("siteshift")

ELECTRO_COLUMNS = ["variant", "pigment_id", "ccd_code", "band", "energy_continuum_ev",
                   "energy_embedded_ev", "shift_full_mev", "shift_first_order_mev",
                   "first_order_minus_full_mev", "shift_full_cm1", "top_residue",
                   "top_residue_mev", "n_charges", "total_charge_e", "screening",
                   "eps_screening", "cavity", "eps_static_cavity", "smearing_A", "qm_hash"]
RESIDUE_COLUMNS = ["variant", "pigment_id", "band", "rank", "residue", "shift_mev", "shift_cm1",
                   "charge_e", "n_atoms", "min_distance_A"]


def electrostatics_tables(embedded_files):
    """(per-site table, per-residue table) from the embedded results."""
    rows, res_rows = [], []
    for p in embedded_files:
        d = io.read_json(p)
        e = d["electrostatics"]
        for band, b in e["bands"].items():
            top = b["residues"][0] if b["residues"] else {}
            rows.append({"variant": d["variant"], "pigment_id": d["pigment_id"],
                         "ccd_code": d["ccd_code"], "band": band,
                         "energy_continuum_ev": b["energy_continuum_ev"],
                         "energy_embedded_ev": b["energy_embedded_ev"],
                         "shift_full_mev": b["shift_full_mev"],
                         "shift_first_order_mev": b["shift_first_order_mev"],
                         "first_order_minus_full_mev": b["shift_first_order_mev"]
                         - b["shift_full_mev"],
                         "shift_full_cm1": b["shift_full_mev"] / 1000.0 * EV2CM1,
                         "top_residue": top.get("residue"),
                         "top_residue_mev": top.get("shift_mev"),
                         "n_charges": e["n_charges"], "total_charge_e": e["total_charge_e"],
                         "screening": e["screening"], "eps_screening": e["eps_screening"],
                         "cavity": e["cavity"], "eps_static_cavity": e["eps_static_cavity"],
                         "smearing_A": e["smearing_A"], "qm_hash": d["qm_hash"]})
            for k, r in enumerate(b["residues"], start=1):
                res_rows.append({"variant": d["variant"], "pigment_id": d["pigment_id"],
                                 "band": band, "rank": k, **{c: r[c] for c in RESIDUE_COLUMNS[4:]}})
    sites = pd.DataFrame(rows, columns=ELECTRO_COLUMNS).sort_values(
        ["variant", "pigment_id", "band"]).reset_index(drop=True)
    return sites, pd.DataFrame(res_rows, columns=RESIDUE_COLUMNS)


BRANCH_RESIDUE_COLUMNS = ["variant", "pair", "band", "pigment_a", "pigment_b", "residue_a",
                          "residue_b", "shift_a_mev", "shift_b_mev", "delta_mev", "delta_cm1"]


def branch_residue_table(residues: pd.DataFrame, pairs, atoms=None) -> pd.DataFrame:
    """Residues behind each branch difference: E(a) − E(b) contributions of matched residues.

    Amino acids of the two chains are matched by the sequence alignment that superposes them
    (:func:`siteshift.structures.pairing.aligned_residues`, from the reference structure);
    the pigment partners are matched to each other; other residues (waters, ions) stand alone.
    Sorted by |Δ| within each pair and band."""
    from ..structures.pairing import aligned_residues
    rows = []
    maps = {}
    for (variant, band), g in residues.groupby(["variant", "band"], sort=True):
        for name, a, b in pairs:
            ra = g[g.pigment_id == a].set_index("residue").shift_mev
            rb = g[g.pigment_id == b].set_index("residue").shift_mev
            if ra.empty or rb.empty:
                continue
            ca, cb = a.split("_", 1)[0], b.split("_", 1)[0]
            if (ca, cb) not in maps:
                maps[(ca, cb)] = {}
                if atoms is not None and ca != cb:
                    try:
                        m = aligned_residues(atoms, ca, cb)
                        fwd = {(ca, i): (cb, i2) for (_n, i), (_n2, i2) in m.items()}
                        # a residue of b's chain near a maps to its counterpart of a's chain
                        # near b: the alignment read both ways
                        maps[(ca, cb)] = {**fwd, **{v: k for k, v in fwd.items()}}
                    except ValueError:
                        pass
            # matched by position (chain, number), so a variant's mutated residue keeps its
            # partner; names come from each site's own table
            by_pos_b = {_position(k): k for k in rb.index if _position(k)}
            pa, pb = _pigment_key(a), _pigment_key(b)
            seen_b = set()
            for res_a, sa in ra.items():
                if res_a == pb:   # each site's partner pigment sits in the other's environment
                    res_b = pa
                else:
                    pos = maps[(ca, cb)].get(_position(res_a))
                    res_b = by_pos_b.get(pos) if pos else None
                sb = rb.get(res_b, np.nan) if res_b is not None else np.nan
                if res_b is not None:
                    seen_b.add(res_b)
                rows.append(_branch_row(variant, name, band, a, b, res_a, res_b, sa, sb))
            for res_b, sb in rb.items():
                if res_b not in seen_b:
                    rows.append(_branch_row(variant, name, band, a, b, None, res_b, np.nan, sb))
    return _by_magnitude(pd.DataFrame(rows, columns=BRANCH_RESIDUE_COLUMNS),
                         ["variant", "pair", "band"], "delta_mev")


def _by_magnitude(df, keys, column, ascending=None):
    """Rows sorted by the keys (ascending unless told), then by |column|, largest first."""
    if df.empty:
        return df
    order = list(ascending or [True] * len(keys)) + [False]
    return df.assign(_abs=df[column].abs()).sort_values(keys + ["_abs"], ascending=order) \
        .drop(columns="_abs").reset_index(drop=True)


def _position(key):
    """(chain, number) of an amino-acid residue key (``A:GLU6`` → ("A", 6)), else None."""
    ch, rest = key.split(":", 1)
    num = rest[3:].rstrip("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz")
    if rest[:3] not in AMINO_ACIDS_SET or not num.lstrip("-").isdigit():
        return None
    return ch, int(num)


def _pigment_key(pid):
    """The residue key of a pigment id (``A_HC4101`` → ``A:HC4101``)."""
    return pid.replace("_", ":", 1)


def _branch_row(variant, name, band, a, b, res_a, res_b, sa, sb):
    sa = 0.0 if pd.isna(sa) else float(sa)
    sb = 0.0 if pd.isna(sb) else float(sb)
    return {"variant": variant, "pair": name, "band": band, "pigment_a": a, "pigment_b": b,
            "residue_a": res_a, "residue_b": res_b, "shift_a_mev": sa, "shift_b_mev": sb,
            "delta_mev": sa - sb, "delta_cm1": (sa - sb) / 1000.0 * EV2CM1}




def scan_table(scan_files, embedded_files, reference) -> pd.DataFrame:
    """The scan's predictions, and for the study's own variants the computed shifts beside
    them (embedded and continuum-only, E(variant) − E(reference))."""
    computed = {}
    for p in embedded_files:
        d = io.read_json(p)
        for band, b in d["electrostatics"]["bands"].items():
            computed[(d["variant"], d["pigment_id"], band)] = (b["energy_embedded_ev"],
                                                               b["energy_continuum_ev"])
    rows = []
    for p in scan_files:
        s = io.read_json(p)
        for r in s["rows"]:
            row = {c: r.get(c) for c in SCAN_COLUMNS}
            row["variant"] = s["variant"]
            if r.get("kind") == "variant" and r.get("band"):
                var = computed.get((r["mutation"], r["pigment_id"], r["band"]))
                ref = computed.get((reference, r["pigment_id"], r["band"]))
                if var and ref:
                    row["computed_embedded_mev"] = (var[0] - ref[0]) * 1000.0
                    row["computed_continuum_mev"] = (var[1] - ref[1]) * 1000.0
            rows.append(row)
    cols = SCAN_COLUMNS + ["computed_embedded_mev", "computed_continuum_mev"]
    return _by_magnitude(pd.DataFrame(rows, columns=cols), ["pigment_id", "band", "kind"],
                         "predicted_shift_mev", ascending=[True, True, False])


def electrostatics_stage_tables(embedded_files, scan_files, report_files, pairs_tsv, out,
                                reference, reference_structure=None, altloc=None, top=10):
    """Write the electrostatics tables and the contribution plot (out: the rule's outputs)."""
    from pathlib import Path

    from .plots import plot_residue_contributions
    sites, residues = electrostatics_tables(embedded_files)
    io.write_tsv(out.sites, sites)
    io.write_tsv(out.residues, residues)
    try:
        pairs_df = pd.read_csv(pairs_tsv, sep="\t")
        pairs = list(zip(pairs_df["name"], pairs_df.pigment_a, pairs_df.pigment_b))
    except (pd.errors.EmptyDataError, KeyError):
        pairs = []
    atoms = None
    if reference_structure:
        from ..structures.reading import read_structure
        atoms = read_structure(reference_structure, altloc or default("altloc"))
    io.write_tsv(out.branches, branch_residue_table(residues, pairs, atoms))
    io.write_tsv(out.scan, scan_table(scan_files, embedded_files, reference))
    reports = []
    for f in report_files:
        r = pd.read_csv(f, sep="\t", keep_default_na=False)
        r.insert(0, "variant", Path(f).parent.name)
        reports.append(r)
    io.write_tsv(out.protonation, pd.concat(reports, ignore_index=True) if reports
                 else pd.DataFrame())
    plot_residue_contributions(residues, out.plot, out.plot_svg, top=top,
                               reference=reference)
    for r in sites.itertuples():
        log.info("%s %s %s: continuum %.4f eV, embedded %.4f eV (%+.1f meV; first order "
                 "%+.1f meV); top %s %+.1f meV", r.variant, r.pigment_id, r.band,
                 r.energy_continuum_ev, r.energy_embedded_ev, r.shift_full_mev,
                 r.shift_first_order_mev, r.top_residue, r.top_residue_mev)
