"""aspectus: eye-movement features from recorded webcam clips, computed offline.

The library is Qt-free. Science lives in small functional modules over numpy
arrays and pandas data frames; I/O sits at the edges; :mod:`aspectus.webcam.pipeline`
strings the steps together with a progress callback and a cancel flag.

Coordinate frame and units are documented once, in :mod:`aspectus.schema`.
"""
__version__ = "0.1.0"

__all__ = ["__version__"]
