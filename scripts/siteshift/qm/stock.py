"""PySCF's own TDA/TDDFT on a converged ground state, with the ε_optical fix applied.

PySCF 2.14 replaces the excited-state dielectric by 1.78 whatever the ground state used; here the
response solvent is rebuilt with the ε we were given (:func:`siteshift.qm.pcm.response_solvent`)
and the value actually used is read back from the object and recorded.
"""
from __future__ import annotations

import numpy as np

from .analysis import dominant_pairs, dominant_pairs_uks
from .pcm import response_solvent
from .settings import EngineError, ExciteSettings

def stock_response(mf, settings: ExciteSettings, stats=None):
    """PySCF's own TDA/TDDFT on a converged ground state, with the ε_optical fix applied.
    stats (a dict, optional) receives closed-shell TDA amplitudes normalised to Σ x² = 1 ('xs'),
    as the fast path gives them."""
    td = mf.TDA() if settings.tda else mf.TDDFT()
    td.nstates = settings.nstates
    td.conv_tol = 1e-7  # energy change (Hartree); PySCF checks residuals at sqrt(conv_tol)
    eps_used = None
    if hasattr(td, "with_solvent"):
        td.with_solvent = response_solvent(mf, settings)
        eps_used = float(td.with_solvent.eps)
    td.kernel()
    if not all(np.atleast_1d(td.converged)):
        raise EngineError("the response (Davidson) solver did not converge; raise nstates or "
                          "loosen response_tol")
    energies = np.asarray(td.e)
    osc = np.asarray(td.oscillator_strength(gauge="length"))
    tdip = np.asarray(td.transition_dipole())
    pairs, xs = [], []
    for x, _y in td.xy:
        if isinstance(x, (tuple, list)):  # UKS: (x_alpha, x_beta)
            pairs.append(dominant_pairs_uks(mf, x))
        else:
            x = np.asarray(x)
            pairs.append(dominant_pairs(mf, x / np.linalg.norm(x)))
            xs.append(x / np.linalg.norm(x))
    if stats is not None and xs and settings.tda:
        stats["xs"] = np.asarray(xs)
    return energies, osc, tdip, pairs, eps_used

