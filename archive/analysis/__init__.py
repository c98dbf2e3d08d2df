"""One test, from its numbers to a decision: trust checks, rates, revenue, verdicts, recommendation, segments.

The names below are imported on first use, so that importing a light module of this package (``results``) does
not load the statistics behind :func:`analyze`.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from archive.analysis.one_test import analyze
    from archive.analysis.results import Analysis, CannotAnalyze, Settings, json_safe

__all__ = ["Analysis", "CannotAnalyze", "Settings", "analyze", "json_safe"]


def __getattr__(name: str) -> Any:
    if name == "analyze":
        from archive.analysis.one_test import analyze

        return analyze
    if name == "Settings":
        from archive.analysis.settings import Settings

        return Settings
    if name in ("Analysis", "CannotAnalyze", "json_safe"):
        from archive.analysis import results

        return getattr(results, name)
    raise AttributeError(name)
