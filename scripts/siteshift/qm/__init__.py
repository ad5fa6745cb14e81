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
