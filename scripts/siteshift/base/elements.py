"""Element data shared by the environment metrics and the QM layer."""
from __future__ import annotations

#: van der Waals radii, Å (Bondi, J. Phys. Chem. 68, 441 (1964); Fe, Zn, Ca: common practice
#: values of 1.8, 1.39, 1.7 as used by biotite/ProtOr-style tables; unknown elements 1.8)
VDW_RADII = {"H": 1.20, "C": 1.70, "N": 1.55, "O": 1.52, "S": 1.80, "P": 1.80, "F": 1.47,
             "CL": 1.75, "BR": 1.85, "I": 1.98, "MG": 1.73, "NA": 2.27, "K": 2.75, "FE": 1.80,
             "ZN": 1.39, "CA": 1.70, "CU": 1.40, "MN": 1.80, "NI": 1.63, "SE": 1.90}


def radius(element: str) -> float:
    return VDW_RADII.get(str(element).upper(), 1.8)
