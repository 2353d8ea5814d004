"""Reading and writing files: recordings (raw binary with our metadata file, HDF5) and their layout,
safe HDF5 reading and in-memory HDF5 writing, atomic writes with the guard that keeps every input from
being written, whole-content hashes, CSV text, and imports of spike times sorted elsewhere.
May import only ``rigside.core.errors``, ``progress``, ``numbers`` and ``textparse``.
"""
