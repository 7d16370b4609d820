"""Attribute time: where the seconds of a part and a touchdown go. Owns the per-lot
figures computed when a lot is derived (``lot_models``: site summaries, the estimate's
inputs; ``estimate``: block times from part totals by non-negative least squares, with
bootstrap intervals and the identifiability check) and the readers of those figures
(``timing``: block tables, unattributed time, site summaries, drift).

May import: ``pipeline.store`` and ``pipeline.read`` (and the shared modules at the top
of the package); never plan, report, jobs or the CLI.
"""
