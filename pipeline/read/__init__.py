"""Read logs: bytes of a datalog in, columns out. Owns the STDF V4 codec and decoders
(``stdf/``), the timing CSV reader (``csvlog``) and the Arrow schemas of every table a
log is decoded into (``schemas``). Pure functions of their input: no store, no files
written.

May import: ``pipeline.errors`` only (the layer at the bottom of the flow).
"""
