"""The one place that calls MkDocs (so the engine can be swapped). Builds are made reproducible by fixing
SOURCE_DATE_EPOCH (MkDocs uses it for the build date in the sitemap) unless the caller set it."""

from __future__ import annotations

import logging
import os
from pathlib import Path


class MkDocsProblems(Exception):
    def __init__(self, messages: list[str]):
        super().__init__("; ".join(messages))
        self.messages = messages


class _Collect(logging.Handler):
    def __init__(self) -> None:
        super().__init__(logging.WARNING)
        self.messages: list[str] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.messages.append(record.getMessage())


def run_mkdocs_build(config_file: Path, strict: bool = True, site_dir: Path | None = None) -> Path:
    """Build the site described by ``config_file`` (into ``site_dir`` when given, instead of the configured
    folder); with ``strict``, any MkDocs warning (a broken link, a missing file) is an error. Returns the folder
    of the built HTML."""
    from mkdocs.commands.build import build
    from mkdocs.config import load_config

    previous = os.environ.get("SOURCE_DATE_EPOCH")
    os.environ.setdefault("SOURCE_DATE_EPOCH", "0")
    collector = _Collect()
    logger = logging.getLogger("mkdocs")
    logger.addHandler(collector)
    try:
        config = load_config(str(config_file), **({"site_dir": str(site_dir)} if site_dir is not None else {}))
        build(config)
    finally:
        logger.removeHandler(collector)
        if previous is None:
            os.environ.pop("SOURCE_DATE_EPOCH", None)
    if strict and collector.messages:
        raise MkDocsProblems(collector.messages)
    return Path(config["site_dir"])
