"""Building the site: records -> entries -> pages and charts -> ``docs/`` -> MkDocs -> ``html/``.

The output folder holds ``docs/`` (generated Markdown and SVG), ``mkdocs.yml``, ``html/`` (the built site) and
``.cache/`` (per-record entries). Only files whose bytes change are rewritten, and files no longer generated are
removed, so a rebuild after one record changed touches only the pages that depend on it before MkDocs runs.
The records folder is only read.

The output folder is the site's own: a marker file says so, and a folder that holds other files (no marker, not
empty) is refused unless forced. Every path written is built from slugs and checked to lie inside the folder.
MkDocs builds into a folder beside ``html/``, which is swapped in only when the build succeeded.
"""

from __future__ import annotations

import html
import json
import shutil
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from archive.planning.hyperprior import DEFAULT_HYPERPRIOR, Hyperprior
from archive.pooling.effects import Effect
from archive.pooling.groups import PoolResult, pool
from archive.records.files import write_replace
from archive.site import layout, pages, svg
from archive.site.entries import TestEntry, entries_for_folder
from archive.site.names import inside, slug

MARKER = ".archive-site"
MARKER_TEXT = "This folder is written by `archive site build`; its files are replaced on every build.\n"

REFERENCE = Path(__file__).resolve().parents[2] / "site"
NAV = """nav:
  - Home: index.md
  - Tests: tests/index.md
  - Themes: themes/index.md
  - Page areas: areas/index.md
  - Learnings: learnings.md
  - Tags: tags.md
  - Reference:
      - Record fields: reference/record-fields.md
      - Analysis JSON: reference/analysis-json.md
      - Python API: reference/python-api.md
      - Glossary: reference/glossary.md
"""


@dataclass
class BuildReport:
    out: Path
    pages: int = 0
    written: list[str] = field(default_factory=list)
    removed: list[str] = field(default_factory=list)
    generate_seconds: float = 0.0
    mkdocs_seconds: float = 0.0
    html: Path | None = None


def mkdocs_config(title: str) -> str:
    """The MkDocs configuration: a navigation of constant size (tests are reached from index pages, so the
    build stays linear in the number of tests), the built-in theme with our overrides (no footer, no
    Previous/Next, full-width pages), our stylesheet and script, and our own search (see :mod:`layout`)."""
    return (
        f"site_name: {json.dumps(html.escape(title))}\n"
        "docs_dir: docs\n"
        "site_dir: html\n"
        "use_directory_urls: false\n"
        f"theme:\n  name: mkdocs\n  custom_dir: {json.dumps(str(layout.THEME_DIR))}\n  navigation_depth: 2\n"
        "  highlightjs: false\n"
        "extra_css:\n  - assets/archive.css\n"
        "extra_javascript:\n  - assets/archive.js\n"
        "plugins: []\n"
        "markdown_extensions:\n  - tables\n  - toc:\n      permalink: false\n"
        "validation:\n  links:\n    not_found: warn\n    anchors: warn\n" + NAV
    )


def _quarter_chart(data: pages.SiteData) -> bytes:
    return svg.bar_chart(pages.quarter_counts(data), "tests started per quarter")


def generate(
    entries: list[TestEntry],
    progress: Callable[[str], None] | None = None,
    hyperprior: Hyperprior = DEFAULT_HYPERPRIOR,
) -> dict[str, bytes]:
    """Every generated file (path under docs/ -> bytes); ``hyperprior`` is the history prior's, for theme pages."""
    if progress:
        progress(f"{len(entries)} tests")
    effects: list[Effect] = [e for entry in entries for e in entry.effects]
    by_theme: PoolResult | None = pool(effects, "theme", permutations=200) if effects else None
    by_area: PoolResult | None = pool(effects, "page_area", permutations=0) if effects else None
    data = pages.site_data(entries, by_theme, by_area, hyperprior)
    files: dict[str, bytes] = {}

    def add(path: str, text: str | bytes) -> None:
        if path in files:
            raise ValueError(f"two generated files would share the path {path!r}; rename one of the tests or arms")
        files[path] = text.encode("utf-8") if isinstance(text, str) else text

    add("index.md", pages.home_page(data))
    add("assets/tests-per-quarter.svg", _quarter_chart(data))
    add("assets/archive.css", layout.stylesheet())
    for name in layout.STATIC_ASSETS:
        add(f"assets/{name}", layout.asset(name))
    add("assets/search-index.js", layout.search_index(entries, data.records, pages.label_pages(data)))
    add("tests/index.md", pages.tests_index(data))
    for entry in entries:
        add(f"tests/{entry.id}.md", pages.test_page(entry, data))
        for name, chart in entry.charts.items():
            add(f"tests/{name}", chart)
    for kind, pooled in (("themes", by_theme), ("areas", by_area)):
        add(f"{kind}/index.md", pages.group_index(kind, pooled, data))
        pooled_names = {pages.slug(g.key) for g in pooled.groups} if pooled else set()
        for key, name in pages.label_pages(data)[kind]:
            if name not in pooled_names:  # a label with nothing to pool (new, untrusted or unfinished tests)
                add(f"{kind}/{name}.md", pages.unpooled_group_page(kind, key, data))
        if pooled is None:
            continue
        for group in pooled.groups:
            name = slug(group.key)
            add(f"{kind}/{name}.md", pages.group_page(kind, group, data, pooled))
            add(f"{kind}/{name}-forest.svg", svg.forest_chart(pages.group_chart_rows(group, data), group.key))
    add("learnings.md", pages.learnings_page(data))
    add("tags.md", pages.tags_page(data))
    for name, text in pages.tag_pages(data).items():
        add(f"tags/{name}", text)
    for name in ("record-fields.md", "analysis-json.md", "python-api.md", "glossary.md"):
        add(f"reference/{name}", (REFERENCE / "reference" / name).read_bytes())
    return files


def write_docs(out: Path, files: dict[str, bytes]) -> tuple[list[str], list[str]]:
    """Write changed files only; remove generated files that are gone. Returns (written, removed)."""
    docs = inside(out, "docs")
    written, removed = [], []
    for rel, data in sorted(files.items()):
        target = inside(out, f"docs/{rel}")
        if target.exists() and target.read_bytes() == data:
            continue
        write_replace(target, data)
        written.append(rel)
    if docs.exists():
        for path in sorted(docs.rglob("*")):
            rel = path.relative_to(docs).as_posix()
            if (path.is_file() or path.is_symlink()) and rel not in files:
                path.unlink()
                removed.append(rel)
    return written, removed


class NotSiteFolder(ValueError):
    """The output folder holds files the site did not write."""


def claim_out(out: Path, force: bool = False) -> None:
    """Make ``out`` the site's folder: a new or empty folder, or one holding the marker of an earlier build; any
    other folder only with ``force``. Writes the marker."""
    if out.exists() and not out.is_dir():
        raise NotSiteFolder(f"{out} is a file, not a folder: choose another --out")
    if out.is_dir() and not (out / MARKER).is_file() and any(out.iterdir()) and not force:
        raise NotSiteFolder(
            f"{out} holds files the site did not write (no {MARKER} marker): choose a new or empty folder for "
            "--out, or pass --force to build there and replace its docs/ and html/"
        )
    out.mkdir(parents=True, exist_ok=True)
    marker = inside(out, MARKER)
    if not marker.is_file() or marker.read_text(encoding="utf-8") != MARKER_TEXT:
        write_replace(marker, MARKER_TEXT)


def _publish(out: Path, config: Path) -> Path:
    """Build the HTML beside ``html/`` and swap it in only when MkDocs succeeded; the old site stays otherwise."""
    from archive.site.engine import run_mkdocs_build

    html_dir, fresh, old = inside(out, "html"), inside(out, ".html-new"), inside(out, ".html-old")
    for leftover in (fresh, old):
        if leftover.is_symlink() or leftover.is_file():
            leftover.unlink()
        elif leftover.exists():
            shutil.rmtree(leftover)
    try:
        run_mkdocs_build(config, site_dir=fresh)
    except BaseException:
        shutil.rmtree(fresh, ignore_errors=True)
        raise
    if html_dir.is_symlink() or html_dir.is_file():
        html_dir.unlink()
    elif html_dir.exists():
        html_dir.rename(old)
    fresh.rename(html_dir)
    shutil.rmtree(old, ignore_errors=True)
    return html_dir


def build_site(
    records_dir: Path,
    out: Path,
    title: str = "Test archive",
    run_mkdocs: bool = True,
    progress: Callable[[str], None] | None = None,
    entries: list[TestEntry] | None = None,
    force: bool = False,
    hyperprior: Hyperprior = DEFAULT_HYPERPRIOR,
) -> BuildReport:
    """Build the site in ``out`` (see the module text) from ``entries``, which come from the store
    (:meth:`archive.Archive.build_site`); without them the records folder is synced into an in-memory store first.
    Raises :class:`NotSiteFolder` for a folder the site does not own (unless ``force``),
    :class:`archive.site.names.OutsideBuild` for a path that would leave it, and
    :class:`archive.site.engine.MkDocsProblems` when MkDocs warns (``html/`` is then kept)."""
    if out.resolve() == records_dir.resolve() or records_dir.resolve() in out.resolve().parents:
        raise ValueError("build the site outside the records folder")
    claim_out(out, force)
    report = BuildReport(out)
    start = time.perf_counter()
    if entries is None:
        entries = entries_for_folder(records_dir)
    files = generate(entries, progress, hyperprior)
    report.pages = sum(1 for name in files if name.endswith(".md"))
    report.written, report.removed = write_docs(out, files)
    config = inside(out, "mkdocs.yml")
    text = mkdocs_config(title)
    if not config.exists() or config.read_text(encoding="utf-8") != text:
        write_replace(config, text)
    report.generate_seconds = time.perf_counter() - start
    if run_mkdocs:
        start = time.perf_counter()
        report.html = _publish(out, config)
        report.mkdocs_seconds = time.perf_counter() - start
    return report
