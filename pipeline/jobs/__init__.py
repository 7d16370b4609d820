"""The jobs that drive the flow end to end. ``decode``: one log to staged Parquet (runs
anywhere); ``ingest``: find the new logs, decode them (here, in worker processes or on a
cluster) and commit them; ``derivation``: block rules and re-deriving the lots they
change; ``cluster`` / ``cluster_tasks``: the same on a Dask cluster; ``nightly``: the
nightly job; ``demo``: the whole job on the sample logs; ``upgrade``: a store of an
earlier release brought up to date.

May import every stage below: report, verify, plan, attribute, store, read. Never the
CLI or ``pipeline.api``.
"""
