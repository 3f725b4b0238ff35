"""The geosoil command line: a thin layer over the :mod:`geosoil` library."""
