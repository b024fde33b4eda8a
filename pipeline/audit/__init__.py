"""The HDF5 audit file: ``codec`` encodes tables and traces, ``writer`` writes a run as it goes, ``reader``
is the one way in for every command that reads a file, and ``verify`` recomputes its hashes."""
