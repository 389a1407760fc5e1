"""H5MD 1.1 (HDF5 for molecular data): the reader (:mod:`kinemap.io.h5md_read`) and the
writer (:mod:`kinemap.io.h5md_write`) under one name, with the HDF5 helpers they share."""

from __future__ import annotations

from ._hdf5 import open_h5, tree
from .h5md_read import H5MDSource, open_h5md
from .h5md_write import H5MDWriter, write_h5md

__all__ = ["H5MDSource", "H5MDWriter", "open_h5md", "write_h5md", "open_h5", "tree"]
