"""STDF V4: the record layouts (``records``), the reference codec, record by record
(``codec``, ``reference``), and the columnar decoder the ingest runs (``decoder``: the
record scan of ``scan``, the column decoder of ``columnar``, the section walk of
``walk``, or the compiled batch engine of ``native`` when ``compiled`` loaded it).

May import: ``pipeline.errors``; within the folder, only ``compiled`` loads the C
extension ``_scan``.
"""
