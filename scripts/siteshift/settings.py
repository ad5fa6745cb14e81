"""Study settings: QM presets and the translation of a validated study config into objects."""
from __future__ import annotations

from .dielectric import DielectricModel
from .engine import ExciteSettings
from .environment import EnvironmentSettings

#: QM presets. "full" is the accuracy the methods are usually run at; "demo" trades accuracy for
#: a laptop-sized demo (split-valence basis without polarisation, coarse grids, fewer states).
QM_PRESETS = {
    "full": {"basis": "def2-svp", "grid_level": 3, "lebedev_order": 17, "nstates": None,
             "tune_xatol": 0.005},
    "demo": {"basis": "6-31g", "grid_level": 1, "lebedev_order": 11, "nstates": 3,
             "tune_xatol": 0.02},
}


def qm_settings(qm: dict, eps_static=1.0, eps_optical=1.0, omega=None, nstates=None):
    """ExciteSettings from the config's `qm` section (preset values unless set explicitly)."""
    preset = QM_PRESETS[qm.get("preset", "full")]
    pick = lambda k: qm[k] if qm.get(k) is not None else preset.get(k)  # noqa: E731
    n = pick("nstates") or nstates or 4
    return ExciteSettings(
        alpha=float(qm.get("alpha", 0.2)),
        omega=float(omega if omega is not None else qm.get("omega") or 0.2),
        eps_static=float(eps_static), eps_optical=float(eps_optical),
        screen=qm.get("screen", "static"), basis=pick("basis"),
        auxbasis=qm.get("auxbasis"), density_fitting=bool(qm.get("density_fitting", True)),
        grid_level=int(pick("grid_level")), pcm_method=qm.get("pcm_method", "IEF-PCM"),
        lebedev_order=int(pick("lebedev_order")), nstates=int(n), tda=bool(qm.get("tda", True)),
        equilibrium=bool(qm.get("equilibrium", False)), solver=qm.get("solver", "fast"),
        max_memory_mb=int(qm.get("max_memory_mb", 4000)),
        df_storage=qm.get("df_storage", "float32"), pcm_fit=bool(qm.get("pcm_fit", False)),
        df_pair_tol=float(qm.get("df_pair_tol", 1e-12)),
        response_grid_level=pick("response_grid_level"),
        response_tol=float(qm.get("response_tol") or ExciteSettings.response_tol),
        occ_window_ev=pick("occ_window_ev"), vir_window_ev=pick("vir_window_ev"))


def tune_xatol(qm: dict) -> float:
    t = qm.get("tune", {}) or {}
    return float(t.get("xatol") or QM_PRESETS[qm.get("preset", "full")]["tune_xatol"])


def environment_settings(env: dict | None) -> EnvironmentSettings:
    env = dict(env or {})
    if "shells_A" in env:
        env["shells_A"] = tuple(env["shells_A"])
    env.pop("cluster_cutoff_A", None)
    return EnvironmentSettings(**env)


def dielectric_model(d: dict | None) -> DielectricModel:
    d = dict(d or {})
    m = DielectricModel(**{k: v for k, v in d.items() if k != "coefficients"},
                        coefficients={**DielectricModel().coefficients,
                                      **(d.get("coefficients") or {})})
    m.check()
    return m
