"""geosoil: gypsum and lime prescriptions from soil samples.

The library is a pure core with I/O at the edges: only :mod:`geosoil.samples`,
:mod:`geosoil.boundaries` and :mod:`geosoil.writers` (and the map and report
writers) touch paths. Everything else takes and returns numpy arrays, affine
transforms, CRSs and GeoDataFrames.
"""

from __future__ import annotations

import logging

__all__ = ["__version__"]

__version__ = "0.1.0"

logging.getLogger(__name__).addHandler(logging.NullHandler())
