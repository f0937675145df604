"""The files tracer writes and reads, one idea a module.

- :mod:`tracer.store.atomic`: a file, or a folder's new files, appear complete or not at all.
- :mod:`tracer.store.openpmd`: openPMD 1.1.0 on HDF5: the file, mesh records, particle records.
- :mod:`tracer.store.hdf5`: opening a tracer file of a given kind, reading its arrays, frozen
  dataclasses as groups.
- :mod:`tracer.store.maps_file`: basis maps (``maps.h5`` and the cache).
- :mod:`tracer.store.result_file`: the field and the traced beams (``result.h5``), read back as
  :class:`tracer.beam.BeamRun`.
- :mod:`tracer.store.landings_csv`: one row per ray (``landings.csv``).
- :mod:`tracer.store.uncertainty_table`: the error bars of a beam's figures in ``result.h5``.

Importing the package or :mod:`tracer.store.atomic` loads neither h5py nor numpy.
"""


class StoreError(ValueError):
    """A file that is not a readable tracer file of the expected kind."""
