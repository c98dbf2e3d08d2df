"""archive: a knowledge base of finished A/B tests.

Records live as YAML files in ``records/``; :class:`archive.Archive` (in :mod:`archive.api`) opens an archive
and its store and offers one method per job (check, index, find, analyze, pool, prior, plan, calibrate,
build_site). The command line (:mod:`archive.cli`) is a thin layer over it.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from archive.api import Archive

__version__ = "0.2.0"
__all__ = ["Archive", "__version__"]


def __getattr__(name: str) -> Any:  # the API is imported on first use, so that `archive --help` stays fast
    if name == "Archive":
        from archive.api import Archive

        return Archive
    raise AttributeError(name)
