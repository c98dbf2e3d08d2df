"""The published site: golden pages, escaping, determinism, incremental rebuilds, links and a real browser."""

from __future__ import annotations

import functools
import http.server
import os
import re
import shutil
import threading
from collections.abc import Iterator
from html.parser import HTMLParser
from pathlib import Path

import pytest

from archive.site.build import build_site
from tests.conftest import snapshot

ROOT = Path(__file__).resolve().parents[1]
FIXTURE = ROOT / "tests" / "fixtures" / "site-archive"  # invented records, one full of escaping traps
GOLDEN = ROOT / "tests" / "golden" / "site"
GOLDEN_PAGES = ["index.md", "tests/basket-bar.md", "themes/shipping-cost.md", "areas/basket.md", "learnings.md"]
ARTIFACTS = ROOT / "test-artifacts"


@pytest.fixture(scope="module")
def built(tmp_path_factory: pytest.TempPathFactory) -> Path:
    records = tmp_path_factory.mktemp("archive") / "records"
    shutil.copytree(FIXTURE, records)
    out = tmp_path_factory.mktemp("site")
    before = snapshot(records)
    build_site(records, out, "Fixture archive")
    assert snapshot(records) == before  # the records are only read
    return out


@pytest.mark.parametrize("page", GOLDEN_PAGES)
def test_golden_pages(built: Path, page: str) -> None:
    produced = (built / "docs" / page).read_text(encoding="utf-8")
    golden = GOLDEN / page
    if os.environ.get("ARCHIVE_UPDATE_GOLDEN"):
        golden.parent.mkdir(parents=True, exist_ok=True)
        golden.write_text(produced, encoding="utf-8")
    assert produced == golden.read_text(encoding="utf-8"), (
        f"regenerate with ARCHIVE_UPDATE_GOLDEN=1 if intended: {page}"
    )


def test_record_text_cannot_inject_html_or_links(built: Path) -> None:
    page = (built / "html" / "tests" / "tricky-text.html").read_text(encoding="utf-8")
    assert "<script>alert(1)" not in page and "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "<img src=x" not in page and "onerror=alert(3)" not in page.replace("&lt;img src=x onerror=alert(3)&gt;", "")
    assert 'href="javascript:' not in page.lower()
    assert "https://wiki.example/ok" in page and "<b>one</b>" not in page
    assert "<h1>#" not in page and "# not a heading" in page
    markdown = (built / "docs" / "tests" / "tricky-text.md").read_text(encoding="utf-8")
    assert "javascript:alert(4)" not in markdown  # the link was dropped, not escaped into the page
    table_rows = [
        line for line in (built / "docs" / "tests" / "index.md").read_text().splitlines() if "tricky-text" in line
    ]
    assert len(table_rows) == 1 and table_rows[0].count(" | ") == 5  # six cells: the pipes in the title are escaped


class _Links(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.targets: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        for name, value in attrs:
            if name in ("href", "src") and value:
                self.targets.append(value)


def _internal_targets(html_dir: Path) -> Iterator[tuple[Path, str]]:
    for page in sorted(html_dir.rglob("*.html")):
        if page.name == "404.html":
            continue  # MkDocs writes the error page with root-relative links, for a web server's root
        parser = _Links()
        parser.feed(page.read_text(encoding="utf-8"))
        for target in parser.targets:
            if re.match(r"^[a-z]+:", target) or target.startswith(("#", "//")):
                continue
            yield page, target.split("#")[0].split("?")[0]


def test_no_broken_internal_links(built: Path) -> None:
    html_dir = built / "html"
    broken = [
        f"{page.relative_to(html_dir)} -> {target}"
        for page, target in _internal_targets(html_dir)
        if target and not (page.parent / target).resolve().exists()
    ]
    assert broken == []


def test_deterministic_and_incremental(built: Path, tmp_path: Path) -> None:
    records = tmp_path / "records"
    shutil.copytree(FIXTURE, records)
    first = tmp_path / "one"
    second = tmp_path / "two"
    build_site(records, first, "Fixture archive")
    build_site(records, second, "Fixture archive")
    for folder in ("docs", "html"):
        one = {k: v for k, v in snapshot(first / folder).items()}
        two = {k: v for k, v in snapshot(second / folder).items()}
        assert one == two, f"{folder} differs between two builds of the same archive"
    again = build_site(records, first, "Fixture archive")
    assert again.written == []
    path = records / "basket-bar-2.yaml"
    path.write_text(path.read_text().replace("The threshold bar helped most", "The threshold bar helped a lot"))
    changed = build_site(records, first, "Fixture archive")
    assert "tests/basket-bar-2.md" in changed.written and "learnings.md" in changed.written
    assert "tests/tricky-text.md" not in changed.written and "tests/basket-bar-lift.svg" not in changed.written


def test_site_refuses_broken_archive(tmp_path: Path) -> None:
    from archive.records.problems import ArchiveInvalid

    records = tmp_path / "records"
    shutil.copytree(FIXTURE, records)
    (records / "broken.yaml").write_text("id: broken\n")
    with pytest.raises(ArchiveInvalid):
        build_site(records, tmp_path / "out")
    with pytest.raises(ValueError):
        build_site(records, records / "site")


def _chromium() -> str | None:
    for name in ("/usr/bin/chromium", "/usr/bin/chromium-browser"):
        if Path(name).exists() and Path("/usr/bin/chromedriver").exists():
            return name
    return None


@pytest.fixture
def browser() -> Iterator[object]:
    binary = _chromium()
    if binary is None:
        if os.environ.get("CI"):
            pytest.fail("CI must install Debian's chromium and chromium-driver for the browser test")
        pytest.skip("needs Debian's chromium and chromium-driver (CI installs them)")
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = binary
    for flag in (
        "--headless=new",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--window-size=1280,1600",
    ):
        options.add_argument(flag)
    driver = webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=options)
    driver.set_page_load_timeout(30)
    yield driver
    driver.quit()


@pytest.fixture
def served(built: Path) -> Iterator[str]:
    handler = functools.partial(_QuietHandler, directory=str(built / "html"))
    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{server.server_address[1]}"
    server.shutdown()
    server.server_close()


class _QuietHandler(http.server.SimpleHTTPRequestHandler):
    def log_message(self, format: str, *args: object) -> None:  # noqa: A002 - the base class names it so
        pass


def test_browser_walkthrough(browser, served: str) -> None:  # type: ignore[no-untyped-def]
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support import expected_conditions as ec
    from selenium.webdriver.support.ui import WebDriverWait

    ARTIFACTS.mkdir(exist_ok=True)
    driver = browser
    driver.get(f"{served}/index.html")
    assert "The test archive at a glance" in driver.page_source
    driver.save_screenshot(str(ARTIFACTS / "home.png"))
    driver.find_element(By.LINK_TEXT, "shipping-cost").click()
    WebDriverWait(driver, 10).until(ec.title_contains("shipping-cost"))
    driver.save_screenshot(str(ARTIFACTS / "theme.png"))
    driver.find_element(By.PARTIAL_LINK_TEXT, "Threshold bar, second round").click()
    WebDriverWait(driver, 10).until(ec.title_contains("Threshold bar"))
    images = driver.find_elements(By.CSS_SELECTOR, "img[src$='.svg']")
    assert images and all(driver.execute_script("return arguments[0].naturalWidth", img) > 0 for img in images)
    driver.save_screenshot(str(ARTIFACTS / "test-page.png"))
    # the theme's built-in search: open the dialog, type, wait for a result linking to a test
    driver.get(f"{served}/index.html")
    driver.find_element(By.CSS_SELECTOR, "a[data-bs-target='#mkdocs_search_modal'], a[data-toggle='modal']").click()
    box = WebDriverWait(driver, 10).until(ec.visibility_of_element_located((By.ID, "mkdocs-search-query")))
    box.send_keys("desktop")
    WebDriverWait(driver, 15).until(
        lambda d: d.find_elements(By.CSS_SELECTOR, "#mkdocs-search-results a[href*='tests/']")
    )
    driver.save_screenshot(str(ARTIFACTS / "search.png"))
