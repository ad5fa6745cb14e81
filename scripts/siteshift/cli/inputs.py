"""Reading and checking the CLI's own inputs (XYZ files); bad input is an :class:`InputError`,
which the command reports as one line and exit status 2.

May import: base, qm (the molecule checks).
"""
from __future__ import annotations

from pathlib import Path

import numpy as np


class InputError(ValueError):
    """Input the command cannot use; the message names the file, line or option and the fix."""


def read_xyz(path):
    """Elements and Å coordinates of an XYZ file (extra columns after x y z are ignored)."""
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path} does not exist")
    lines = path.read_text(errors="replace").splitlines()
    try:
        n = int(lines[0].split()[0])
    except (IndexError, ValueError):
        raise InputError(f"{path} is not an XYZ file (first line must be the atom count)") from None
    el, xyz = [], []
    for k, line in enumerate(lines[2:2 + n], start=3):
        parts = line.split()
        try:
            el.append(parts[0])
            xyz.append([float(v) for v in parts[1:4]])
            if len(xyz[-1]) != 3:
                raise ValueError
        except (IndexError, ValueError):
            raise InputError(f"{path} line {k}: expected 'element x y z', got {line!r}") from None
    if len(el) != n:
        raise InputError(f"{path} declares {n} atoms but holds {len(el)}")
    return el, np.array(xyz)


def check_xyz_job(path, elements, coords, charge, multiplicity):
    """The molecule checks of :func:`siteshift.qm.molecule.check_molecule`, naming the file."""
    from ..qm.molecule import check_molecule
    if multiplicity < 1:
        raise InputError(f"--multiplicity {multiplicity}: a multiplicity is 2S+1 >= 1")
    check_molecule(elements, coords, charge, multiplicity - 1, source=str(path))
