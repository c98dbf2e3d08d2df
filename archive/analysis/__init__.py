"""One test, from its numbers to a decision: trust checks, rates, revenue, verdicts, recommendation, segments."""

from archive.analysis.one_test import analyze
from archive.analysis.results import Analysis, CannotAnalyze, Settings, json_safe

__all__ = ["Analysis", "CannotAnalyze", "Settings", "analyze", "json_safe"]
