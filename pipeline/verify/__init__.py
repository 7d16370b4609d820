"""Verify a concurrent program against the serial one: two correlation lots (the baseline
lot, run by the serial program, and the candidate lot, by the concurrent one, usually on
the same units) compared per test, per unit and in time.

``queries`` holds every store read (the catalog views, one lot at a time); ``units``
matches units and finds changed bins; ``compare`` the per-test statistics and verdicts
(``stats`` the formulas); ``elapsed`` the realised against the projected saving.
``verify(store, baseline, candidate, ...)`` is the entry point; ``compare_lots`` the same
on lots already read. The terminal text is ``cli/verify_text``, the report section
``report/verify``.

May import: ``pipeline.plan``, ``pipeline.attribute``, ``pipeline.store``,
``pipeline.read`` and the shared modules; never report, jobs or the CLI.
"""

from __future__ import annotations

from .compare import MIN_VALUES, SAME, SHIFTED, TOO_FEW, VERDICTS, Rules, TestResult
from .core import CAUTIONS, Verification, compare_lots, verify
from .units import MATCHES

__all__ = ["CAUTIONS", "MATCHES", "MIN_VALUES", "Rules", "SAME", "SHIFTED", "TOO_FEW",
           "TestResult",
           "VERDICTS", "Verification", "compare_lots", "verify"]
