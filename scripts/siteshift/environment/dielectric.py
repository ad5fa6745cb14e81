"""Effective dielectric constants of pigment sites from local environment metrics.

The mapping is a transparent linear model, clipped to [eps_min, eps_max]:

    ε_static = clip(ε_min + Σ_k c_k · m_k)

with metrics m_k from :mod:`siteshift.environment.metrics` and coefficients c_k from the study config.
Each term is reported, so a user sees why a site got its value. Rationale of the defaults
(continuum electrostatics practice: protein interiors ε ≈ 2–4, up to ≈ 10 or more near polar and
charged groups and water; Schutz & Warshel, Proteins 44, 400 (2001); Li et al., JCTC 9, 2126
(2013)):
- burial × 2.0: a pigment fully enclosed by a neutral, apolar protein gets ε ≈ 4 (ε_min + 2);
- exposure × 10.0 (only when the exposed surface faces water): a fully exposed pigment ≈ 12;
- 0.1 per polar N/O atom within 4 Å, 0.5 per charged group within 7 Å, 0.15 per water within 6 Å:
  polar and mobile charged groups raise the local static screening;
- −0.1 per Kyte–Doolittle unit of the contact-weighted hydropathy (apolar lowers; rescale the
  coefficient if you choose the Eisenberg scale, whose range is about a quarter as wide);
- −1.0 × packing density (0–1): tightly packed surroundings leave little room for reorientation.
ε_optical = n² of the medium (default 2.0, protein refractive index ≈ 1.41; common practice),
never above ε_static.
"""
from __future__ import annotations

from dataclasses import dataclass, field

from ..base.defaults import default

_DIEL = default("dielectric")  # the study config schema's defaults (siteshift.base.defaults)
DEFAULT_COEFFICIENTS = _DIEL["coefficients"]


class DielectricError(ValueError):
    pass


@dataclass
class DielectricModel:
    mode: str = _DIEL["mode"]            # "local" (metrics) or "uniform"
    eps_min: float = _DIEL["eps_min"]
    eps_max: float = _DIEL["eps_max"]
    eps_uniform: float = _DIEL["eps_uniform"]      # ε_static in uniform mode
    eps_optical: float = _DIEL["eps_optical"]      # n² of the medium
    exposed_medium: str = _DIEL["exposed_medium"]  # "water" or "vacuum": faces the exposed surface
    coefficients: dict = field(default_factory=lambda: dict(DEFAULT_COEFFICIENTS))
    overrides: dict = field(default_factory=dict)   # pigment_id -> {eps_static, eps_optical}

    def check(self):
        if self.mode not in ("local", "uniform"):
            raise DielectricError(f"dielectric.mode must be 'local' or 'uniform', got {self.mode!r}")
        if not 1.0 <= self.eps_min <= self.eps_max:
            raise DielectricError(f"need 1 <= eps_min <= eps_max, got {self.eps_min}, "
                                  f"{self.eps_max}")
        if self.eps_optical < 1.0:
            raise DielectricError(f"eps_optical must be >= 1, got {self.eps_optical}")
        if self.exposed_medium not in ("water", "vacuum"):
            raise DielectricError("exposed_medium must be 'water' or 'vacuum'")
        unknown = set(self.coefficients) - set(DEFAULT_COEFFICIENTS)
        if unknown:
            raise DielectricError(f"unknown dielectric coefficient(s) {sorted(unknown)}; known: "
                                  f"{sorted(DEFAULT_COEFFICIENTS)}")
        for pid, ov in self.overrides.items():
            es, eo = ov.get("eps_static"), ov.get("eps_optical")
            if es is not None and es < 1 or eo is not None and eo < 1:
                raise DielectricError(f"override for {pid}: dielectric constants must be >= 1")
            if es is not None and eo is not None and eo > es:
                raise DielectricError(f"override for {pid}: eps_optical {eo} > eps_static {es}")

    def assign(self, pigment_id: str, metrics: dict) -> dict:
        """The dielectric row of one site: ε_static, ε_optical and every term's contribution."""
        self.check()
        row = {"pigment_id": pigment_id, "mode": self.mode, "eps_min": self.eps_min,
               "eps_max": self.eps_max}
        terms = {}
        if self.mode == "uniform":
            raw = self.eps_uniform
        else:
            raw = self.eps_min
            for k, c in {**DEFAULT_COEFFICIENTS, **self.coefficients}.items():
                m = float(metrics.get(k, 0.0) or 0.0)
                if k == "exposure" and self.exposed_medium != "water":
                    m = 0.0
                terms[k] = c * m
                raw += terms[k]
        for k in DEFAULT_COEFFICIENTS:
            row[f"contrib_{k}"] = round(terms.get(k, 0.0), 4)
        row["eps_static_raw"] = round(raw, 4)
        eps_s = min(max(raw, self.eps_min), self.eps_max)
        row["clipped"] = bool(eps_s != raw)
        eps_o = min(self.eps_optical, eps_s)
        source = self.mode
        ov = self.overrides.get(pigment_id)
        if ov:
            eps_s = float(ov.get("eps_static", eps_s))
            eps_o = float(ov.get("eps_optical", min(eps_o, eps_s)))
            source = "override"
        if eps_o > eps_s:
            raise DielectricError(
                f"config key 'dielectric.overrides.{pigment_id}.eps_optical': {eps_o:g} is above "
                f"the site's eps_static {eps_s:g} ({self.mode} mode); lower it, or give "
                "eps_static beside it")
        row.update(eps_static=round(eps_s, 4), eps_optical=round(eps_o, 4), source=source)
        return row
