"""Study plots (matplotlib, headless): site energies and simulated absorption spectra."""
from __future__ import annotations

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

from ..base.io import read_json  # noqa: E402
from ..base.units import EV2CM1, NM_EV  # noqa: E402
from .tables import spectrum  # noqa: E402


def _save(fig, out_png, out_svg=None):
    """PNG (150 dpi) and, if asked, SVG; closes the figure."""
    fig.tight_layout()
    fig.savefig(out_png, dpi=150)
    if out_svg:
        fig.savefig(out_svg)
    plt.close(fig)


def _reference_first(values, reference=None):
    return sorted(values, key=lambda v: (v != reference, v))


def _named(v, reference):
    return f"{v} (reference)" if v == reference else v


def plot_site_energies(sites_tsv, out_png, out_svg=None, reference=None):
    """Every band of every site (markers per band, colours per variant, the reference first and
    named), eV on the left axis and nm on the right; returns the frame plotted."""
    df = pd.read_csv(sites_tsv, sep="\t")
    # one series per variant and mode (continuum-only and embedded side by side); the mode is
    # named only when a study has both
    modes = df["mode"] if "mode" in df else pd.Series("continuum", index=df.index)
    both = modes.nunique() > 1
    rank = {v: k for k, v in enumerate(_reference_first(df.variant.unique(), reference))}
    series = sorted(set(zip(df.variant, modes)), key=lambda vm: (rank[vm[0]], vm[1]))
    pigments = sorted(df.pigment_id.unique())
    bands = sorted(df.band.unique(), key=lambda b: (b == "S1", b))
    fig, ax = plt.subplots(figsize=(max(6.0, 1.4 * len(pigments) + 3.0),
                                    4.2 + 0.18 * len(series) * len(bands) / 2))
    width = 0.8 / max(1, len(series))
    colors = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    for k, (v, mode) in enumerate(series):
        sv = df[(df.variant == v) & (modes == mode)]
        notes = (["reference"] if v == reference else []) + ([mode] if both else [])
        label = v + (f" ({', '.join(notes)})" if notes else "")
        for band, marker in zip(bands, "osD^v<>ph"):
            sb = sv[sv.band == band]
            if not len(sb):
                continue
            x = [pigments.index(p) + (k - (len(series) - 1) / 2) * width for p in sb.pigment_id]
            ax.scatter(x, sb.energy_ev, marker=marker, color=colors[k % len(colors)],
                       label=f"{label}: {band}", zorder=3)
    ax.set_xticks(range(len(pigments)), pigments, rotation=30, ha="right")
    ax.set_xlabel("pigment")
    ax.set_ylabel("site energy (eV)")
    sec = ax.secondary_yaxis("right", functions=(lambda e: NM_EV / np.clip(e, 1e-3, None),
                                                  lambda nm: NM_EV / np.clip(nm, 1e-3, None)))
    sec.set_ylabel("wavelength (nm)")
    ax.grid(axis="y", alpha=0.3)
    ax.legend(fontsize=7, frameon=False, ncol=2, loc="upper center",
              bbox_to_anchor=(0.5, -0.28))
    ax.set_title("Site energies (every computed band)", fontsize=9)
    _save(fig, out_png, out_svg)
    return df


def plot_spectra(result_files, out_png, out_svg=None, fwhm_ev=0.15, reference=None):
    """Gaussian-broadened absorption per variant with its sticks (oscillator strengths, right
    axis), in eV and in nm — the nm curve carries the Jacobian |dE/dλ| = hc/λ², so both enclose
    the same area —, and the difference from the reference when there are other variants.
    Returns {"grid_ev", "curves", "differences", "nm", "curves_nm"} (the plotted arrays)."""
    by_variant = {}
    for p in result_files:
        r = read_json(p)
        for s in r["states"]:
            by_variant.setdefault(r.get("variant") or "", []).append(
                (s["energy_ev"], s["oscillator_strength"]))
    variants = _reference_first(by_variant, reference)
    ref = reference if reference in by_variant else variants[0]
    allE = [e for v in by_variant.values() for e, _f in v]
    grid = np.linspace(max(min(allE) - 4 * fwhm_ev, 0.05), max(allE) + 4 * fwhm_ev, 1200)
    nm = NM_EV / grid
    curves = {v: spectrum(*np.array(by_variant[v]).T, grid, fwhm_ev) for v in variants}
    curves_nm = {v: y * NM_EV / nm ** 2 for v, y in curves.items()}
    diffs = {v: curves[v] - curves[ref] for v in variants if v != ref}
    ncol = 3 if diffs else 2
    fig, axes = plt.subplots(1, ncol, figsize=(4.3 * ncol, 3.6))
    colors = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    a1, a2 = axes[0], axes[1]
    s1 = a1.twinx()
    for k, v in enumerate(variants):
        c = colors[k % len(colors)]
        e, f = np.array(by_variant[v]).T
        a1.plot(grid, curves[v], color=c, label=_named(v, ref), lw=1.6 if k == 0 else 1.2,
                ls="-" if k == 0 else "--")
        s1.vlines(e, 0, f, color=c, lw=1.0, alpha=0.7)
        a2.plot(nm, curves_nm[v], color=c, label=_named(v, ref), ls="-" if k == 0 else "--")
    s1.set_ylabel("oscillator strength f (sticks)")
    s1.set_ylim(bottom=0)
    a1.set_xlabel("energy (eV)")
    a1.set_ylabel("absorbance per eV (Σf-normalised)")
    a2.set_xlabel("wavelength (nm)")
    a2.set_ylabel("absorbance per nm (× |dE/dλ|)")
    for a in (a1, a2):
        a.legend(fontsize=7, frameon=False)
        a.set_ylim(bottom=0)
    if diffs:
        a3 = axes[2]
        for k, (v, d) in enumerate(diffs.items(), start=1):
            a3.plot(grid, d, color=colors[k % len(colors)], label=f"{v} − {ref}")
            i = int(np.argmax(np.abs(d)))
            a3.annotate(f"max |Δ| {abs(d[i]):.3g} at {grid[i]:.3f} eV", (grid[i], d[i]),
                        fontsize=6, xytext=(4, 4), textcoords="offset points")
        a3.axhline(0, color="k", lw=0.8)
        a3.set_xlabel("energy (eV)")
        a3.set_ylabel("difference (per eV)")
        a3.set_title(f"difference from the reference {ref}", fontsize=8)
        a3.legend(fontsize=7, frameon=False)
    fig.suptitle(f"Simulated absorption (Gaussian FWHM {fwhm_ev} eV)", fontsize=9)
    _save(fig, out_png, out_svg)
    return {"grid_ev": grid, "curves": curves, "differences": diffs, "nm": nm,
            "curves_nm": curves_nm}


def plot_sweep(df, out_png, out_svg=None):
    """Energy against ε_static, one line per variant × pigment × band."""
    fig, ax = plt.subplots(figsize=(5.5, 3.6))
    dimers = df[df.band == "dimer_splitting"] if len(df) else df
    df = df[df.band != "dimer_splitting"] if len(df) else df
    if len(dimers):   # dimers computed whole: their splitting on a second axis (cm⁻¹)
        ax2 = ax.twinx()
        for (v, p), g in dimers.groupby(["variant", "pigment_id"]):
            g = g.sort_values("eps_static")
            ax2.plot(g.eps_static, g.energy_ev * EV2CM1, "s--", label=f"{v} {p} splitting")
        ax2.set_ylabel("dimer splitting (cm⁻¹)")
        ax2.legend(fontsize=7, frameon=False, loc="lower right")
    if len(df):
        bands = df.band.unique()
        use = df[df.band != "S1"] if any(b != "S1" for b in bands) else df
        for (v, p, b), g in use.groupby(["variant", "pigment_id", "band"]):
            g = g.sort_values("eps_static")
            ax.plot(g.eps_static, g.energy_ev, "o-", label=f"{v} {p} {b}")
        ax.set_xscale("log")
        ax.legend(fontsize=7, frameon=False)
    ax.set_xlabel("ε_static (uniform)")
    ax.set_ylabel("excitation, IP, EA or ion-pair energy (eV)")
    ax.grid(alpha=0.3)
    _save(fig, out_png, out_svg)


def plot_variant_shifts(variants_tsv, out_png, out_svg=None, reference=None):
    """Bar chart of E(variant) − E(reference) per pigment and band in meV (cm⁻¹ on the right),
    each bar labelled with its value (a zero shift drawn as a tick), the reference named; an
    empty frame when the study has only the reference."""
    try:
        df = pd.read_csv(variants_tsv, sep="\t")
    except pd.errors.EmptyDataError:
        df = pd.DataFrame()
    if reference is None and len(df) and "reference" in df:
        reference = str(df.reference.iloc[0])
    fig, ax = plt.subplots(figsize=(max(5.5, 0.7 * len(df) + 2), 3.6))
    if len(df) and "delta_ev" in df:
        df = df[df.status == "ok"]
        modes = df["mode"] if "mode" in df else ["continuum"] * len(df)
        labels = [f"{v}\n{p} {b}" + ("" if m == "continuum" else f"\n{m}")
                  for v, p, b, m in zip(df.variant, df.pigment_id, df.band, modes)]
        mev = df.delta_ev.to_numpy() * 1000
        x = np.arange(len(df))
        ax.bar(x, mev, color=["tab:red" if d < 0 else "tab:blue" for d in mev])
        ax.scatter(x[mev == 0], mev[mev == 0], marker="_", s=200, color="k", zorder=3)
        for xi, d in zip(x, mev):
            ax.annotate(f"{d:+.1f}", (xi, d), fontsize=6, ha="center",
                        va="bottom" if d >= 0 else "top",
                        xytext=(0, 2 if d >= 0 else -2), textcoords="offset points")
        ax.set_xticks(x, labels, fontsize=6)
        ax.axhline(0, color="k", lw=0.8)
        lim = max(1.0, float(np.abs(mev).max()) if len(mev) else 1.0) * 1.25
        ax.set_ylim(-lim, lim)
    else:
        ax.text(0.5, 0.5, "only the reference variant", ha="center", transform=ax.transAxes)
    ax.set_ylabel(f"E(variant) − E({reference or 'reference'}) (meV)")
    sec = ax.secondary_yaxis("right", functions=(lambda m: m * EV2CM1 / 1000,
                                                  lambda c: c * 1000 / EV2CM1))
    sec.set_ylabel("cm⁻¹")
    ax.set_title(f"Shifts against the reference {reference or ''} (red: red shift)", fontsize=9)
    _save(fig, out_png, out_svg)


def plot_residue_contributions(residues: pd.DataFrame, out_png, out_svg=None, top=10,
                               reference=None):
    """The residues that shift each site most (first order, meV; one panel per variant ×
    pigment, the named band — Qy or bright — rather than S1), reference variant first."""
    df = residues[residues.band != "S1"] if (residues.band != "S1").any() else residues
    keys = sorted({(v, p, b) for v, p, b in zip(df.variant, df.pigment_id, df.band)},
                  key=lambda k: (k[0] != reference, k))
    n = max(1, len(keys))
    fig, axes = plt.subplots(1, n, figsize=(3.6 * n, 0.32 * top + 1.6), squeeze=False)
    for ax, (v, p, b) in zip(axes[0], keys):
        g = df[(df.variant == v) & (df.pigment_id == p) & (df.band == b)].head(top)[::-1]
        y = np.arange(len(g))
        ax.barh(y, g.shift_mev, color=["tab:red" if s < 0 else "tab:blue" for s in g.shift_mev])
        ax.set_yticks(y, g.residue, fontsize=7)
        for yi, s in zip(y, g.shift_mev):
            ax.annotate(f"{s:+.1f}", (s, yi), fontsize=6, va="center",
                        ha="left" if s >= 0 else "right",
                        xytext=(2 if s >= 0 else -2, 0), textcoords="offset points")
        ax.axvline(0, color="k", lw=0.8)
        ax.set_xlabel("shift (meV)  [1 meV = 8.07 cm⁻¹]")
        ax.set_title(f"{v}: {p} {b}", fontsize=8)
    if not keys:
        axes[0][0].text(0.5, 0.5, "no embedded sites", ha="center", transform=axes[0][0].transAxes)
    fig.suptitle("Residue contributions to each site's shift (first order; red: red shift)",
                 fontsize=9)
    _save(fig, out_png, out_svg)


def plot_couplings(exciton_files, out_png, out_svg=None):
    """Coupling matrix (cm⁻¹, the route that builds the Hamiltonian) of each variant, with the
    three routes' values written in each cell."""
    res = [read_json(f) for f in exciton_files]
    n = max(1, len(res))
    fig, axes = plt.subplots(1, n, figsize=(3.8 * n, 3.6), squeeze=False)
    for ax, r in zip(axes[0], res):
        ids = [s["pigment_id"] for s in r["sites"]]
        J = np.zeros((len(ids), len(ids)))
        text = {}
        for c in r["couplings"]:
            i, j = ids.index(c["pigment_a"]), ids.index(c["pigment_b"])
            J[i, j] = J[j, i] = c[f"j_{r['route']}_cm1"]
            text[(i, j)] = text[(j, i)] = (f"tdc {c['j_tdc_cm1']:.1f}\nq {c['j_charges_cm1']:.1f}"
                                           f"\ndip {c['j_dipole_cm1']:.1f}")
        lim = max(1e-9, np.abs(J).max())
        im = ax.imshow(J, cmap="RdBu_r", vmin=-lim, vmax=lim)
        for (i, j), t in text.items():
            ax.text(j, i, t, ha="center", va="center", fontsize=6,
                    color="white" if abs(J[i, j]) > 0.5 * lim else "black")
        ax.set_xticks(range(len(ids)), ids, rotation=30, ha="right", fontsize=7)
        ax.set_yticks(range(len(ids)), ids, fontsize=7)
        ax.set_title(f"{r['variant']}: J ({r['route']}, screening {r['screening']['model']})",
                     fontsize=8)
        fig.colorbar(im, ax=ax, label="J (cm⁻¹)", shrink=0.8)
    _save(fig, out_png, out_svg)


def plot_exciton_states(exciton_files, out_png, out_svg=None, group="all"):
    """Each exciton state's composition (site weights c²) against its energy, per variant."""
    res = [read_json(f) for f in exciton_files]
    n = max(1, len(res))
    fig, axes = plt.subplots(1, n, figsize=(3.8 * n, 3.4), squeeze=False)
    for ax, r in zip(axes[0], res):
        g = r["groups"].get(group)
        if not g:
            continue
        c = np.asarray(g["states"]["coefficients"]) ** 2
        bottom = np.zeros(c.shape[1])
        x = np.arange(c.shape[1])
        for i, site in enumerate(g["sites"]):
            ax.bar(x, c[i], bottom=bottom, label=site)
            bottom += c[i]
        ax.set_xticks(x, [f"{e:.3f} eV\nD {d:.1f}" for e, d in
                          zip(g["states"]["energies_ev"], g["states"]["dipole_strength_D2"])],
                      fontsize=6)
        ax.set_ylabel("site weight c²")
        ax.set_title(f"{r['variant']} ({group}): exciton states", fontsize=8)
        ax.legend(fontsize=6, frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.16),
                  ncol=min(4, len(g["sites"])))
    _save(fig, out_png, out_svg)


def plot_exciton_spectra(exciton_files, out_png, out_svg=None, group="all"):
    """Absorption (ε) and CD (Δε), M⁻¹ cm⁻¹, of each variant's exciton states against
    wavelength, with the exciton and monomer sticks."""
    from ..interactions.excitons import absorptivity, circular_dichroism
    res = [read_json(f) for f in exciton_files]
    fig, (a1, a2) = plt.subplots(2, 1, figsize=(6, 5.2), sharex=True)
    for r in res:
        g = r["groups"].get(group)
        if not g:
            continue
        sp, st = g["spectra"], g["states"]
        grid = np.asarray(sp["energy_ev"])
        nm = np.asarray(sp["wavelength_nm"])
        eps = absorptivity(grid, sp["absorption_D2_per_ev"])
        deps = circular_dichroism(grid, sp["cd_DmuB_per_ev"])
        line, = a1.plot(nm, eps, label=f"{r['variant']} exciton")
        a1.plot(nm, absorptivity(grid, sp["monomer_absorption_D2_per_ev"]), ls=":",
                color=line.get_color(), label=f"{r['variant']} uncoupled")
        a2.plot(nm, deps, color=line.get_color(), label=r["variant"])
        e = np.asarray(st["energies_ev"])
        d = np.asarray(st["dipole_strength_D2"])
        scale = max(np.max(eps), 1e-12) / max(d.max(), 1e-12)
        a1.vlines(NM_EV / e, 0, d * scale * 0.5, color=line.get_color(), lw=1.5)
        ms = np.asarray(g["site_energies_ev"])
        a1.plot(NM_EV / ms, np.zeros_like(ms), "v", color=line.get_color(), ms=5)
        rs = np.asarray(st["rotational_strength_DmuB"])
        cd_scale = max(np.max(np.abs(deps)), 1e-12) / max(np.abs(rs).max(), 1e-12)
        a2.vlines(NM_EV / e, 0, rs * cd_scale * 0.5, color=line.get_color(), lw=1.5)
    a1.set_ylabel("ε (M⁻¹ cm⁻¹)")
    a2.set_ylabel("Δε (M⁻¹ cm⁻¹)")
    a2.axhline(0, color="k", lw=0.6)
    a2.set_xlabel("wavelength (nm)")
    a1.legend(fontsize=7, frameon=False)
    a1.set_title(f"Exciton absorption and CD ({group}), molecules in vacuum (no local-field "
                 "factor);\nsticks: exciton states (half height), ▼ site energies", fontsize=8)
    _save(fig, out_png, out_svg)


def plot_ion_ladder(pairs: pd.DataFrame, branches: pd.DataFrame, out_png, out_svg=None):
    """Per variant, each branch's energy ladder side by side: the donor's lowest excitation
    (D*) and the ion pairs (D⁺A⁻) of its steps, as levels in eV; a step without its mirror is
    drawn in the middle."""
    variants = sorted(pairs.variant.unique()) if len(pairs) else []
    fig, axes = plt.subplots(1, max(1, len(variants)), figsize=(3.2 * max(1, len(variants)), 3.8),
                             sharey=True, squeeze=False)
    for ax, v in zip(axes[0], variants):
        g = pairs[pairs.variant == v]
        br = branches[branches.variant == v] if len(branches) else branches
        col = {}
        for r in br.itertuples():
            col[r.step_a], col[r.step_b] = 0.0, 1.0
        for r in g.itertuples():
            x = col.get(r.pair, 0.5)
            ax.hlines(r.energy_ev, x - 0.3, x + 0.3, color="C3", lw=2)
            ax.annotate(f"{r.donor}⁺{r.acceptor}⁻", (x, r.energy_ev), fontsize=6,
                        ha="center", va="bottom")
            if r.donor_excitation_ev == r.donor_excitation_ev and r.donor_excitation_ev:
                ax.hlines(r.donor_excitation_ev, x - 0.3, x + 0.3, color="C0", lw=2)
                ax.annotate(f"{r.donor}*", (x, r.donor_excitation_ev), fontsize=6,
                            ha="center", va="top")
        ax.set_xticks([0, 0.5, 1] if col else [0.5])
        ax.set_xticklabels(["branch A", "", "branch B"] if col else ["pairs"])
        ax.set_xlim(-0.5, 1.5)
        ax.set_title(str(v), fontsize=9)
        ax.grid(alpha=0.3, axis="y")
    axes[0][0].set_ylabel("energy above the ground state (eV)")
    if not variants:
        axes[0][0].text(0.5, 0.5, "no ion pairs configured", ha="center", va="center",
                        transform=axes[0][0].transAxes)
    _save(fig, out_png, out_svg)


def plot_gaps(gaps: pd.DataFrame, out_png, out_svg=None):
    """Fundamental gap against ε_static per pigment type: ΔSCF IP − EA and the orbital gap,
    for the screened functional and the same one unscreened."""
    fig, ax = plt.subplots(figsize=(5.5, 3.6))
    if len(gaps):
        for (code, kind), g in gaps.groupby(["ccd_code", "functional"]):
            g = g.sort_values("eps_static")
            ls = "-" if kind == "screened" else "--"
            ax.plot(g.eps_static, g.gap_deltascf_ev, "o" + ls, color="C0",
                    label=f"{code} ΔSCF IP−EA ({kind})")
            ax.plot(g.eps_static, g.gap_orbital_ev, "s" + ls, color="C3",
                    label=f"{code} orbital gap ({kind})")
        ax.set_xscale("log")
        from matplotlib.ticker import NullFormatter, ScalarFormatter
        ax.xaxis.set_major_formatter(ScalarFormatter())
        ax.xaxis.set_minor_formatter(NullFormatter())
        eps = sorted(gaps.eps_static.unique())
        ax.set_xticks(eps, [f"{e:.3g}" for e in eps])
        ax.legend(fontsize=7, frameon=False)
    else:
        ax.text(0.5, 0.5, "gap check off", ha="center", va="center", transform=ax.transAxes)
    ax.set_xlabel("ε_static")
    ax.set_ylabel("gap (eV)")
    ax.grid(alpha=0.3)
    _save(fig, out_png, out_svg)
