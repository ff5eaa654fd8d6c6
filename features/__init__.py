"""heartsway feature engine: heart-health features from body-recoil force traces.

A pure library (numpy, scipy, PyWavelets). The catalogue of public functions,
by family, is filled in as the modules land.
"""

__version__ = "0.1.0"
