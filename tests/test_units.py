"""Small modules: band naming, atomic writes, input hashing, QM presets."""
import json

import numpy as np
import pytest

from siteshift.qm.bands import assign_bands, axis_cosines
from siteshift.qm.settings import EngineError
from siteshift.base.io import atomic_write_text, stable_hash, write_json
from siteshift.base.defaults import QM_PRESETS
from siteshift.study.config import qm_settings


def _state(e, f, d):
    return {"energy_ev": e, "oscillator_strength": f, "transition_dipole_debye": d}


def test_qy_qx_from_axes():
    # Gouterman picture: Qy lowest and polarised along the Qy axis, Qx above it along the other
    coords = np.array([[0, 0, 0], [0, 4.0, 0], [0, 0, 0], [4.0, 0, 0]], float)
    axes = {"Qy": (0, 1), "Qx": (2, 3)}
    states = [_state(1.6, 0.3, [0.2, 6.0, 0.1]), _state(2.1, 0.05, [4.0, 0.5, 0.0]),
              _state(2.9, 1.0, [1.0, 1.2, 0.0])]
    assign_bands(states, coords, axes)
    assert [s["band"] for s in states] == ["Qy", "Qx", None]
    assert states[0]["axis_cos"]["Qy"] > 0.99
    assert axis_cosines([0, 0, 1], coords, (0, 1)) == 0.0


def test_dark_state_below_the_bright_one_does_not_take_qy():
    # A weakly allowed state (f 0.02, a charge-transfer-like state) 0.1 eV below the Qy state
    # (f 0.3), both along the Qy axis: the Qy name goes to the bright one (Gouterman: Qy is the
    # strong, lowest π→π* band of a chlorin; the brief's case "labels land on dark states").
    # The Soret-like state along the same axis 1.2 eV higher (f 1.0) is outside the 0.5 eV
    # window and stays unnamed.
    coords = np.array([[0, 0, 0], [0, 4.0, 0], [0, 0, 0], [4.0, 0, 0]], float)
    axes = {"Qy": (0, 1), "Qx": (2, 3)}
    states = [_state(1.5, 0.02, [0.1, 1.0, 0.1]), _state(1.6, 0.3, [0.2, 6.0, 0.1]),
              _state(2.1, 0.05, [4.0, 0.5, 0.0]), _state(2.8, 1.0, [0.3, 9.0, 0.0]),
              _state(3.0, 0.01, [0.0, 0.0, 1.0])]
    warnings = assign_bands(states, coords, axes)
    assert [s["band"] for s in states] == [None, "Qy", "Qx", None, None]
    assert warnings == []
    # the same copy with its states listed in another order gets the same names
    again = [dict(s) for s in reversed(states)]
    assign_bands(again, coords, axes)
    assert [s["band"] for s in reversed(again)] == [None, "Qy", "Qx", None, None]


def test_states_at_or_below_zero_mark_the_reference_as_not_the_ground_state():
    # an excitation energy <= 0 means a lower state of the same spin exists (a negative
    # eigenvalue of the TDA matrix; common practice): measured on 19HC's heme modelled as a
    # four-coordinate Fe(II) singlet, TDA states at -0.187 and -0.101 eV
    coords = np.array([[0, 0, 0], [0, 4.0, 0], [0, 0, 0], [4.0, 0, 0]], float)
    states = [dict(_state(e, f, d), index=k + 1) for k, (e, f, d) in enumerate(
        [(-0.187, 0.0, [0, 0, 0.1]), (-0.101, 0.0, [0, 0.1, 0]), (1.6, 0.3, [0.2, 6.0, 0.1])])]
    w = assign_bands(states, coords, {"Qy": (0, 1)})
    assert w[0].startswith("reference: state(s) 1, 2") and "-0.187" in w[0]
    assert states[2]["band"] == "Qy"
    assert not any(x.startswith("reference") for x in assign_bands(states[2:], coords))


def test_band_naming_warns_when_nstates_is_too_small():
    coords = np.array([[0, 0, 0], [0, 4.0, 0], [0, 0, 0], [4.0, 0, 0]], float)
    axes = {"Qy": (0, 1), "Qx": (2, 3)}
    # two states: Qy found; nothing along Qx → a warning naming nstates
    states = [_state(1.6, 0.3, [0.2, 6.0, 0.1]), _state(1.9, 0.001, [1.0, 0.0, 0.0])]
    w = assign_bands(states, coords, axes)
    assert [s["band"] for s in states] == ["Qy", None]
    assert len(w) == 1 and w[0].startswith("Qx:") and "nstates" in w[0]
    # Qy on the highest computed state: a brighter one may lie above
    states = [_state(1.2, 0.0, [1.0, 0.0, 0.0]), _state(1.6, 0.3, [0.2, 6.0, 0.1])]
    w = assign_bands(states, coords, {"Qy": (0, 1)})
    assert states[1]["band"] == "Qy" and "highest of the 2" in w[0] and "nstates" in w[0]


def test_heme_bands_q_and_soret():
    # Gouterman's two in-plane band systems of a porphyrin: weak Q (α; β is its vibronic side
    # band) and strong Soret. Plane = the two N–N axes (x, y); a z-polarised state (a
    # charge-transfer or axial-ligand state) is never named, nor a d–d state with f ~ 0.
    coords = np.array([[0, 0, 0], [4.0, 0, 0], [0, 0, 0], [0, 4.0, 0]], float)
    axes = {"Qy": (2, 3), "Qx": (0, 1)}
    states = [_state(1.9, 0.0, [0.0, 0.0, 0.0]), _state(2.2, 0.02, [0.0, 0.0, 1.5]),
              _state(2.3, 0.004, [0.5, 0.3, 0.02]), _state(2.35, 0.003, [0.3, -0.5, 0.0]),
              _state(3.2, 0.9, [6.0, 2.0, 0.1]), _state(3.25, 1.1, [-2.0, 6.5, 0.0]),
              _state(3.6, 0.05, [0.0, 0.1, 2.0])]
    w = assign_bands(states, coords, axes, scheme="heme")
    assert [s["band"] for s in states] == [None, None, "Q", None, None, "Soret", None]
    assert w == []
    # too few states to reach the Soret: a warning naming nstates; Q still named
    w = assign_bands(states[:4], coords, axes, scheme="heme")
    assert states[2]["band"] == "Q" and "Soret" in w[0] and "nstates" in w[0]


def test_library_hemes_use_the_heme_scheme(library):
    assert library["HEM"].band_scheme == "heme"
    assert library["BCL"].band_scheme == "axes"


def test_bright_state_without_axes():
    states = [_state(3.0, 0.001, [0.1, 0, 0]), _state(3.5, 0.4, [3, 0, 0])]
    assign_bands(states, np.zeros((2, 3)))
    assert [s["band"] for s in states] == [None, "bright"]


def test_atomic_write_leaves_no_partial_file(tmp_path):
    p = tmp_path / "a" / "x.json"
    write_json(p, {"e": np.float64(1.5), "v": np.arange(2)})
    assert json.loads(p.read_text()) == {"e": 1.5, "v": [0, 1]}
    with pytest.raises(TypeError):
        write_json(p, {"bad": object()})
    assert json.loads(p.read_text()) == {"e": 1.5, "v": [0, 1]}  # old content intact
    assert not [f for f in p.parent.iterdir() if f.name.endswith(".part")]
    atomic_write_text(p, "ok")
    assert p.read_text() == "ok"


def test_atomic_writes_keep_the_users_umask(tmp_path):
    # a file written atomically gets the mode open() would give it (POSIX: 0666 & ~umask),
    # not mkstemp's private 0600
    import os
    from siteshift.study.stages import _save_arrays
    old = os.umask(0o022)
    try:
        write_json(tmp_path / "t.json", {"a": 1})
        _save_arrays(tmp_path / "r.npz", x=np.zeros(2))
        modes = {f.name: f.stat().st_mode & 0o777 for f in tmp_path.iterdir()}
        os.umask(0o077)
        write_json(tmp_path / "p.json", {"a": 1})
    finally:
        os.umask(old)
    assert modes == {"t.json": 0o644, "r.npz": 0o644}
    assert (tmp_path / "p.json").stat().st_mode & 0o777 == 0o600


def test_stable_hash_ignores_float_noise_but_not_changes():
    a = {"x": [1.0000000001, 2.0], "s": {"eps": 4.0}}
    b = {"s": {"eps": 4.0}, "x": [1.0, 2.0]}
    assert stable_hash(a) == stable_hash(b)
    assert stable_hash(a) != stable_hash({"x": [1.001, 2.0], "s": {"eps": 4.0}})


def test_presets_and_explicit_keys():
    s = qm_settings({"preset": "demo"}, eps_static=4.0, eps_optical=2.0, omega=0.25)
    assert (s.basis, s.grid_level, s.nstates) == ("6-31g", 1, 3)
    s = qm_settings({"preset": "full", "basis": "def2-tzvp"}, nstates=6)
    assert s.basis == "def2-tzvp" and s.grid_level == QM_PRESETS["full"]["grid_level"]
    assert s.nstates == 6 and s.eps_screen == 1.0
    # nstates: the config's value, else the pigment type's (a heme's 6: Q and Soret), else the
    # preset's
    assert qm_settings({"preset": "demo"}, nstates=6).nstates == 6
    assert qm_settings({"preset": "demo", "nstates": 2}, nstates=6).nstates == 2
    # the Davidson tolerance: the engine's default unless set (null in the schema)
    assert qm_settings({"response_tol": None}).response_tol == 3e-4
    assert qm_settings({"response_tol": 1e-5}).response_tol == 1e-5
    with pytest.raises(EngineError, match="response_tol"):
        qm_settings({"response_tol": 0.5}).check()


def test_sweep_guess_kinds_and_interpolation():
    # Linear in x = 1/ε through the last two points (exact for a density linear in 1/ε); two
    # points at the same ε (an anchor equal to a grid point) fall back to the previous density.
    from siteshift.study.sweep import sweep_guess
    d = lambda x: np.array([[1.0 + 2.0 * x]])  # noqa: E731
    assert sweep_guess([], [], 4.0) == ("default", None)
    kind, dm = sweep_guess([d(0.5)], [0.5], 4.0)
    assert kind == "previous" and dm[0, 0] == d(0.5)[0, 0]
    kind, dm = sweep_guess([d(0.12), d(0.5)], [0.12, 0.5], 4.0)
    assert kind == "extrapolated" and abs(dm[0, 0] - d(0.25)[0, 0]) < 1e-12
    kind, dm = sweep_guess([d(0.25), d(0.25)], [0.25, 0.25], 8.0)
    assert kind == "previous"
    # the two computed points nearest to 1/ε are used, not the last two: here the site (0.12)
    # and ε 4 (0.25) bracket ε 8 (0.125); a wrong pick would still be linear, so perturb ε 2
    pts = [d(0.12), d(0.5) + 1.0, d(0.25)]
    kind, dm = sweep_guess(pts, [0.12, 0.5, 0.25], 8.0)
    assert kind == "extrapolated" and abs(dm[0, 0] - d(0.125)[0, 0]) < 1e-12
    assert sweep_guess(pts, [0.12, 0.5, 0.25], 8.0, extrapolate=False)[1] is pts[0]


def test_sweep_order_outward_from_the_anchor():
    from siteshift.study.sweep import sweep_order
    assert sweep_order([16, 2, 8, 4]) == [2.0, 4.0, 8.0, 16.0]
    # site at ε 8.33 (1/ε 0.12): distances in 1/ε 0.005 (8), 0.0575 (16), 0.13 (4), 0.38 (2)
    assert sweep_order([2, 4, 8, 16], 1 / 8.33) == [8.0, 16.0, 4.0, 2.0]
