"""Start-up cost control for commands that never need pandas.

pyarrow imports pandas the first time it converts anything, whenever pandas is installed
(OR-Tools pulls it in), and that import costs about half a second here — a third of the
whole budget for ingesting 100 MB. Tandem never hands data to pandas, so the commands
that are start-up sensitive (``ingest``, ``sql``) tell Python that pandas is absent
before pyarrow first looks. Commands that build reports or plans do not call this.
"""

from __future__ import annotations

import sys


def keep_pandas_out() -> None:
    if "pandas" not in sys.modules:
        sys.modules["pandas"] = None  # type: ignore[assignment]
