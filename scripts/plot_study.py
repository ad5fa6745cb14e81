"""Snakemake script: site-energy and simulated-spectrum plots (PNG and SVG)."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.study.plots import plot_site_energies, plot_spectra, plot_variant_shifts
from siteshift.study.stages import setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
plot_site_energies(sm.input.sites, sm.output.sites, sm.output.sites_svg,
                   reference=sm.params.reference)
plot_spectra(list(sm.input.excitations), sm.output.spectrum, sm.output.spectrum_svg,
             fwhm_ev=sm.params.fwhm, reference=sm.params.reference)
plot_variant_shifts(sm.input.variants, sm.output.shifts, sm.output.shifts_svg,
                    reference=sm.params.reference)
