"""Geometry shared by every layer: least-squares superposition of point sets."""
from __future__ import annotations

import numpy as np


def kabsch(P, Q):
    """Rotation R and translation t minimising |(P R + t) − Q| (rows are points; Kabsch,
    Acta Cryst. A32, 922 (1976))."""
    P, Q = np.asarray(P, dtype=float), np.asarray(Q, dtype=float)
    pc, qc = P.mean(0), Q.mean(0)
    H = (P - pc).T @ (Q - qc)
    U, _S, Vt = np.linalg.svd(H)
    d = np.sign(np.linalg.det(U @ Vt))
    D = np.diag([1.0, 1.0, d])
    R = U @ D @ Vt
    return R, qc - pc @ R
