"""The one source of defaults: the study config's JSON Schema and the QM presets.

Every default a user can change is written once, in ``config/schemas/config.schema.yaml`` (each key
with its description, default and bounds). The workflow reads it through Snakemake's ``validate``
(which fills the defaults into the config), and the library and the CLI read the same file here:
:func:`default` for one key, :func:`fill` for a whole section. The QM presets below choose the
values that the schema leaves ``null`` (basis, grids, state count, ω tolerance).
"""
from __future__ import annotations

import copy
from functools import lru_cache
from pathlib import Path

import yaml

#: the repository root (scripts/siteshift/base/defaults.py → three levels up)
PROJECT_ROOT = Path(__file__).resolve().parents[3]
SCHEMA_PATH = PROJECT_ROOT / "config" / "schemas" / "config.schema.yaml"

#: QM presets. "full" is the accuracy the methods are usually run at; "demo" trades accuracy for
#: a laptop-sized demo (split-valence basis without polarisation, coarse grids, fewer states).
#: A key set explicitly under `qm:` (not null) wins over the preset.
QM_PRESETS = {
    "full": {"basis": "def2-svp", "grid_level": 3, "lebedev_order": 17, "nstates": None,
             "tune_xatol": 0.005},
    "demo": {"basis": "6-31g", "grid_level": 1, "lebedev_order": 11, "nstates": 3,
             "tune_xatol": 0.02},
}
#: ω (bohr⁻¹) of a calculation that is neither tuned nor given one: the LRC-ωPBEh value
#: (Rohrdanz, Martins, Herbert, JCP 130, 054112 (2009)), so that with α = 0.2 and no screening
#: the functional is a published one.
FALLBACK_OMEGA = 0.2
#: states per pigment when neither the config, the preset nor the pigment library says
DEFAULT_NSTATES = 4
#: how bands are named (siteshift.qm.bands): Qy/Qx along two axes, or a heme's Q and Soret
BAND_SCHEMES = ("axes", "heme")


@lru_cache(maxsize=None)
def schema() -> dict:
    """The study config's JSON Schema (parsed once)."""
    return yaml.safe_load(SCHEMA_PATH.read_text())


def _node(path: str) -> dict:
    node = schema()
    for part in [p for p in path.split(".") if p]:
        try:
            node = node["properties"][part]
        except KeyError:
            raise KeyError(f"config key {path!r} is not in {SCHEMA_PATH}") from None
    return node


def _defaults_of(node: dict):
    if "properties" in node:
        out = copy.deepcopy(node.get("default", {})) or {}
        for k, sub in node["properties"].items():
            if "default" in sub or "properties" in sub:
                out.setdefault(k, _defaults_of(sub))
        return out
    return copy.deepcopy(node.get("default"))


def default(path: str):
    """The schema's default of one key, e.g. ``default("qm.alpha")``; a section gives a dict."""
    return _defaults_of(_node(path))


def fill(section: dict | None, path: str) -> dict:
    """A copy of a config section with every key it lacks filled from the schema's defaults
    (nested sections too), as Snakemake's ``validate`` fills the workflow's config. A key given
    as None (YAML null) takes the default too."""
    return _merge(default(path), section or {})


def _merge(base, over):
    if isinstance(base, dict) and isinstance(over, dict):
        out = dict(base)
        for k, v in over.items():
            if v is None and base.get(k) is not None:
                continue
            out[k] = _merge(base.get(k), v) if k in base else copy.deepcopy(v)
        return out
    return copy.deepcopy(over)


def preset(name: str) -> dict:
    """The values of one QM preset (see :data:`QM_PRESETS`)."""
    try:
        return QM_PRESETS[name]
    except KeyError:
        raise KeyError(f"config key 'qm.preset': {name!r} is not one of "
                       f"{sorted(QM_PRESETS)}") from None


#: `qm` config keys that change how a QM job runs, not its numbers: left out of the rules'
#: params (rules/common.smk), read from the config by siteshift.study.stages.job_qm, and (but
#: threads, no ExciteSettings field) out of the QM cache key
RUN_ONLY_QM_KEYS = ("threads", "max_memory_mb", "warm_start")
