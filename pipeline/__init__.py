"""cubewright: synthetic radio observations of SPH simulation snapshots.

The package turns gas particles into FITS spectral cubes as a radio telescope
would record them.  The entry points are :func:`pipeline.chain.run` (the whole
chain from a config) and :func:`pipeline.config.load_config`.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
