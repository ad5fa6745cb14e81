"""Quantum chemistry over plain data (element symbols, Å coordinates, settings objects):

- :mod:`.settings`   ExciteSettings, EngineError, thread set-up
- :mod:`.functional` SRSH xc strings
- :mod:`.scf`        molecules, the SCF object, the fallback ladder, float32 early cycles
- :mod:`.dfjk`       in-core fitted tensors and their J/K
- :mod:`.pcm`        factorised and fitted PCM, the response continuum with the ε asked for
- :mod:`.xcgrid`     dense-BLAS XC potential and the MO-basis XC kernel
- :mod:`.fasttda`    the fast MO-basis TDA; :mod:`.stock` PySCF's own TDA/TDDFT
- :mod:`.analysis`   dominant orbital pairs; :mod:`.bands` Qy/Qx and bright-state naming
- :mod:`.excite`     one excited-state calculation end to end; :mod:`.tuning` optimal ω

May import: :mod:`siteshift.base`, PySCF, numpy, scipy. Never structures, environment,
interactions or study: callers hand it arrays and settings.
"""
from __future__ import annotations

import os

#: PySCF releases this layer is tested with (pyproject.toml pins the same range). The fast path
#: reaches into PySCF internals (PCM intermediates, numint blocks, DF tensors, Davidson), which
#: change between releases without notice: another version could run and give wrong numbers.
TESTED_PYSCF = ">=2.14,<2.15"
#: set to 1 to run on an untested PySCF anyway (and check the results against the tests first)
ALLOW_UNTESTED_ENV = "SITESHIFT_ALLOW_UNTESTED_PYSCF"


class UntestedPySCF(ImportError):
    """The installed PySCF lies outside the range siteshift's QM layer is tested with."""


def check_pyscf_version(version: str | None = None) -> str:
    """Raise :class:`UntestedPySCF` unless ``version`` (default: the installed PySCF's) lies in
    :data:`TESTED_PYSCF`, or the environment sets ``SITESHIFT_ALLOW_UNTESTED_PYSCF=1``."""
    from packaging.specifiers import SpecifierSet
    if version is None:
        import pyscf
        version = pyscf.__version__
    if version in SpecifierSet(TESTED_PYSCF) or os.environ.get(ALLOW_UNTESTED_ENV) == "1":
        return version
    raise UntestedPySCF(
        f"PySCF {version} is installed, but siteshift's QM layer is tested with PySCF "
        f"{TESTED_PYSCF}: install a tested release (python3 -m pip install "
        f"'pyscf{TESTED_PYSCF}'), or set {ALLOW_UNTESTED_ENV}=1 and run the test suite first")


check_pyscf_version()
