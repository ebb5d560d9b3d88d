"""Small helpers shared by every subpackage (private; no public API).

* :mod:`ndtmap._shared.validate`: argument checks at the public boundary, whose
  messages name the argument, the value received and what is accepted;
* :mod:`ndtmap._shared.mapgeom`: geometry of (scan, index) maps: cell widths and
  areas on non-uniform coordinates, sampling along a line, nearest cells;
* :mod:`ndtmap._shared.arrays`: dask or numpy, whole A-scans per chunk, attribute
  values netCDF can store.

Nothing here imports another part of ndtmap except :mod:`ndtmap.errors`.
"""
