"""The published site: golden pages, escaping, determinism, incremental rebuilds, links and a real browser."""

from __future__ import annotations

import functools
import http.server
import os
import re
import shutil
import socket
import threading
import urllib.error
import urllib.parse
import urllib.request
from collections.abc import Iterator
from html.parser import HTMLParser
from pathlib import Path

import pytest
from typer.testing import CliRunner

from archive.cli.main import app
from archive.render.formats import md_text
from archive.site import pages
from archive.site.build import MARKER, NotSiteFolder, build_site
from archive.site.engine import MkDocsProblems
from archive.site.names import OutsideBuild, inside, slug
from archive.site.serve import ServeProblem, open_server
from tests.conftest import snapshot

ROOT = Path(__file__).resolve().parents[1]
FIXTURE = ROOT / "tests" / "fixtures" / "site-archive"  # invented records, one full of escaping traps
GOLDEN = ROOT / "tests" / "golden" / "site"
GOLDEN_PAGES = [
    "index.md",
    "tests/basket-bar.md",
    "tests/hostile-names.md",
    "tags.md",
    "themes/shipping-cost.md",
    "areas/basket.md",
    "learnings.md",
]
ARTIFACTS = ROOT / "test-artifacts"


@pytest.fixture(scope="module")
def site_dirs(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    records = tmp_path_factory.mktemp("archive") / "records"
    shutil.copytree(FIXTURE, records)
    out = tmp_path_factory.mktemp("site")
    before = snapshot(records)
    build_site(records, out, "Fixture archive")
    assert snapshot(records) == before  # the records are only read
    return records, out


@pytest.fixture(scope="module")
def built(site_dirs: tuple[Path, Path]) -> Path:
    return site_dirs[1]


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


def test_new_theme_with_failed_check_builds_and_stands_apart(built: Path) -> None:
    # gift-wrap-note.yaml: the only test of its theme and page area, with a sample ratio mismatch
    docs = built / "docs"
    assert (built / "html" / "tests" / "gift-wrap-note.html").exists()
    assert (built / "html" / "themes" / "gift-wrapping.html").exists()
    assert (built / "html" / "areas" / "product-page.html").exists()
    themes = (docs / "themes" / "index.md").read_text(encoding="utf-8")
    ranked, apart = themes.split("Too few tests to rank")
    assert "gift-wrapping" not in ranked and "[gift-wrapping](gift-wrapping.md) | 0 |" in apart
    assert "shipping-cost" not in ranked and "shipping-cost" in apart  # 3 comparisons: fewer than 5, not ranked
    page = (docs / "tests" / "gift-wrap-note.md").read_text(encoding="utf-8")
    assert page.index("**Verdict:**") < page.index("## Hypothesis")  # the answer comes first
    assert "trust check failed: sample ratio" in page and '<span class="tone tone-bad">FAILED</span>' in page


def test_running_and_planned_tests_show_plan_not_verdict(built: Path) -> None:
    docs = built / "docs"
    for name, status in (("review-stars", "running"), ("size-guide", "planned")):
        page = (docs / "tests" / f"{name}.md").read_text(encoding="utf-8")
        assert "## Plan" in page and "visitors per arm" in page
        assert "**Verdict:**" not in page and "### Conversion" not in page and "-lift.svg" not in page
        assert f"Not analysed while the test is {status}" in page
        row = next(line for line in (docs / "tests" / "index.md").read_text().splitlines() if f"({name}.md)" in line)
        assert row.endswith("| no verdict yet |")
    # 5,000 + 5,010 visitors of 2 x 40,000 planned (review-stars.yaml): 10,010 / 80,000 = 12.5%, shown as 13%
    assert "10,010 of 80,000 planned visitors so far (13%)" in (docs / "tests" / "review-stars.md").read_text()


def test_no_documentation_chrome_and_search_without_worker(built: Path) -> None:
    html = built / "html"
    page = (html / "tests" / "basket-bar.html").read_text(encoding="utf-8")
    assert "Documentation built with" not in page and 'rel="next"' not in page and 'rel="prev"' not in page
    assert "search/main.js" not in page and "worker" not in page.lower()
    assert not (html / "search").exists()  # no built-in search plugin (its worker fails on file pages)
    index = (html / "assets" / "search-index.js").read_text(encoding="utf-8")
    assert index.startswith("window.ARCHIVE_SEARCH = ") and "<" not in index  # the tricky title is escaped
    assert "tests/gift-wrap-note.html" in index and '"delivery"' in index


def test_quarters_without_tests_are_shown() -> None:
    import datetime as dt
    from types import SimpleNamespace

    from archive.site.pages import quarter_counts

    def rec(day: str) -> SimpleNamespace:
        return SimpleNamespace(started=dt.date.fromisoformat(day))

    data = SimpleNamespace(records={"a": rec("2023-02-01"), "b": rec("2023-11-30"), "c": rec("2024-01-15")})
    # by hand: Q1 2023 holds a, Q2 and Q3 2023 are empty, Q4 2023 holds b, Q1 2024 holds c
    assert quarter_counts(data) == [("2023 Q1", 1), ("2023 Q2", 0), ("2023 Q3", 0), ("2023 Q4", 1), ("2024 Q1", 1)]


def test_forest_labels_wrap_without_losing_words() -> None:
    from archive.site.svg import wrap_label

    title = "A handwritten gift note offered on the product page for orders placed before the December cut-off"
    lines = wrap_label(title, 30)
    assert len(lines) > 1 and all(len(line) <= 30 for line in lines) and " ".join(lines) == title
    assert wrap_label("x" * 70, 30) == ["x" * 30, "x" * 30, "x" * 10]


def test_unknown_verdict_name_gets_the_neutral_tone_with_its_label() -> None:
    from archive.site.layout import label

    assert label("some-new-verdict") == '<span class="tone tone-neutral">some-new-verdict</span>'
    assert 'tone-bad">FAILED<' in label("FAILED")


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
        if target and not (page.parent / urllib.parse.unquote(target)).resolve().exists()
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
    from selenium.webdriver.common.keys import Keys
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
    # colours and their labels: every coloured label carries text, and a failed check does not look like a pass
    driver.get(f"{served}/tests/gift-wrap-note.html")
    labels = driver.find_elements(By.CSS_SELECTOR, "span.tone")
    assert labels and all(label.text.strip() for label in labels)
    by_text = {label.text.strip(): label.value_of_css_property("background-color") for label in labels}
    assert {"FAILED", "ok", "inconclusive", "iterate"} <= set(by_text)
    assert by_text["FAILED"] != by_text["ok"] and by_text["FAILED"] != "rgba(0, 0, 0, 0)"
    answer = driver.find_element(By.CSS_SELECTOR, "h1 + blockquote").text
    assert "Verdict:" in answer and "Decision:" in answer and "trust check failed" in answer
    assert not driver.find_elements(By.CSS_SELECTOR, "footer p, a[rel='next'], a[rel='prev']")
    driver.save_screenshot(str(ARTIFACTS / "untrusted-test.png"))
    # a running test shows its plan and progress, no verdict
    driver.get(f"{served}/tests/review-stars.html")
    answer = driver.find_element(By.CSS_SELECTOR, "h1 + blockquote").text
    assert "No verdict" in answer and "Verdict:" not in answer and "leaning" not in driver.page_source
    # the tests index sorts and filters
    driver.get(f"{served}/tests/index.html")
    rows = driver.find_elements(By.CSS_SELECTOR, "table tbody tr")
    driver.find_element(By.CSS_SELECTOR, ".table-filter-text").send_keys("gift")
    visible = [r for r in rows if r.is_displayed()]
    assert len(visible) == 1 and "gift note" in visible[0].text
    driver.find_element(By.CSS_SELECTOR, ".table-filter-text").send_keys(Keys.BACKSPACE * 4)
    assert all(r.is_displayed() for r in rows)
    started = driver.find_element(By.XPATH, "//th[normalize-space(.)='started']")
    started.click()
    dates = [r.find_elements(By.TAG_NAME, "td")[1].text for r in driver.find_elements(By.CSS_SELECTOR, "tbody tr")]
    filled = [d for d in dates if d]
    assert filled == sorted(filled) and dates[-1] == ""  # ascending, the unstarted test last
    driver.save_screenshot(str(ARTIFACTS / "tests-index.png"))
    # search through the server too
    _search(driver, f"{served}/themes/index.html", "desktop", "tests/")


def _search(driver, url: str, words: str, expect: str) -> list[str]:  # type: ignore[no-untyped-def]
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import WebDriverWait

    driver.get(url)
    box = driver.find_element(By.ID, "archive-search")
    box.click()
    box.send_keys(words)
    WebDriverWait(driver, 10).until(
        lambda d: d.find_elements(By.CSS_SELECTOR, f"#archive-search-results a[href*='{expect}']")
    )
    return [a.get_attribute("href") for a in driver.find_elements(By.CSS_SELECTOR, "#archive-search-results a")]


def test_browser_from_disk_and_phone(browser, built: Path) -> None:  # type: ignore[no-untyped-def]
    """The site as a user opens it from disk (file:// pages: no web worker, no fetch), on a wide and a phone
    screen."""
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support import expected_conditions as ec
    from selenium.webdriver.support.ui import WebDriverWait

    ARTIFACTS.mkdir(exist_ok=True)
    driver = browser
    html = (built / "html").as_uri()
    # search typed and answered on a page opened from disk, from the home page and from a nested page
    found = _search(driver, f"{html}/index.html", "desktop", "tests/basket-bar.html")
    assert all(link.startswith("file://") for link in found)
    driver.save_screenshot(str(ARTIFACTS / "search-from-disk.png"))
    driver.find_element(By.CSS_SELECTOR, "#archive-search-results a[href*='tests/']").click()
    WebDriverWait(driver, 10).until(ec.url_contains("/tests/"))
    # a word the records do not use, found through its synonym (postage ~ delivery), from a nested page
    found = _search(driver, f"{html}/tests/basket-bar.html", "postage", "tests/basket-bar")
    assert all("/html/tests/" in link or "/html/themes/" in link or "/html/areas/" in link for link in found)
    box = driver.find_element(By.ID, "archive-search")
    box.clear()
    box.send_keys("zzzqqq")
    WebDriverWait(driver, 10).until(lambda d: "Nothing found" in d.find_element(By.ID, "archive-search-results").text)
    # the new theme (its only test failed a trust check) has its page, listed apart from the ranking
    driver.get(f"{html}/themes/index.html")
    driver.find_element(By.LINK_TEXT, "gift-wrapping").click()
    WebDriverWait(driver, 10).until(ec.title_contains("gift-wrapping"))
    assert driver.find_elements(By.PARTIAL_LINK_TEXT, "A handwritten gift note")
    # forest plot: every label inside the drawing (no title cut), each test row a link to its page
    driver.get(f"{html}/themes/shipping-cost.html")
    svg = driver.find_element(By.CSS_SELECTOR, ".chart svg")
    view_width = driver.execute_script("return arguments[0].viewBox.baseVal.width", svg)
    boxes = driver.execute_script(
        "return Array.from(arguments[0].querySelectorAll('text.forest-label, text.forest-note')).map(t => {"
        " const b = t.getBBox(); return [b.x, b.x + b.width, t.textContent]; })",
        svg,
    )
    assert len(boxes) >= 5
    for left, right, text in boxes:
        assert left >= 0 and right <= view_width, f"label {text!r} spans {left:.0f}..{right:.0f} of {view_width}"
    labels = [text for _, _, text in boxes]
    assert any("Threshold bar, second round" in t for t in labels)
    links = driver.find_elements(By.CSS_SELECTOR, ".chart svg a")
    assert len(links) == 3
    driver.save_screenshot(str(ARTIFACTS / "forest.png"))
    driver.execute_script("arguments[0].dispatchEvent(new MouseEvent('click', {bubbles: true}))", links[1])
    WebDriverWait(driver, 10).until(ec.url_contains("/tests/"))
    # a phone: nothing wider than the screen; tables and charts scroll inside their own box, charts unscaled
    driver.set_window_size(390, 900)
    for page in (
        "index.html",
        "tests/index.html",
        "tests/basket-bar.html",
        "themes/shipping-cost.html",
        "learnings.html",
    ):
        driver.get(f"{html}/{page}")
        width, inner = driver.execute_script("return [document.body.scrollWidth, window.innerWidth]")
        assert width <= inner, f"{page}: body {width} px wide on a {inner} px screen"
        for chart in driver.find_elements(By.CSS_SELECTOR, ".chart svg, img[src$='.svg']"):
            shown, natural = driver.execute_script(
                "const c = arguments[0]; return [c.getBoundingClientRect().width,"
                " c.tagName === 'IMG' ? c.naturalWidth : c.viewBox.baseVal.width]",
                chart,
            )
            assert shown >= natural - 0.5, f"{page}: a chart is scaled down, its text below 11 px"
        driver.save_screenshot(str(ARTIFACTS / f"phone-{page.replace('/', '-').removesuffix('.html')}.png"))


# --- hostile record text (issue 14): every field that reaches a page carries an attribute-list payload ---------

PAYLOADS = {  # field of tests/fixtures/site-archive/hostile-names.yaml -> (text, a page that shows it)
    "title": ("Logos { tabindex=1 autofocus=1 onfocus=document.body.remove() }", "tests/hostile-names.html"),
    "owner": ("Owner { autofocus=1 onfocus=alert(13) }", "tests/hostile-names.html"),
    "page area": ("Area { tabindex=1 autofocus=1 onfocus=alert(14) }", "tests/index.html"),
    "theme": ("Theme { tabindex=1 autofocus=1 onfocus=alert(15) }", "learnings.html"),
    "tag": ("Tag { autofocus=1 onfocus=alert(16) }", "tags.html"),
    "control arm": ("Control { autofocus=1 onfocus=alert(17) }", "tests/hostile-names.html"),
    "segment dimension (plan.segments)": ("Device { autofocus=1 onfocus=alert(19) }", "tests/hostile-names.html"),
    "segment": ("Mobile { autofocus=1 onfocus=alert(20) }", "tests/hostile-names.html"),
    "plan prior source": ("Prior { autofocus=1 onfocus=alert(21) }", "tests/hostile-names.html"),
    "decision rationale": ("Rationale { autofocus=1 onfocus=alert(22) }", "tests/hostile-names.html"),
    "learning": ("Learning { tabindex=1 autofocus=1 onfocus=alert(23) }", "learnings.html"),
    "link label": ("Link { autofocus=1 onfocus=alert(24) }", "tests/hostile-names.html"),
    "hypothesis (code fence)": ("~~~ { autofocus=1 onfocus=alert(26) }", "tests/hostile-names.html"),
    "arm that climbs out": ("../../../../../../outside", "tests/hostile-names.html"),
}
# The only such attributes the site writes: the theme's dialogs (tabindex="-1") and our sortable headers ("0").
TEMPLATE_ATTRIBUTES = {("div", "tabindex", "-1"), ("th", "tabindex", "0")}  # the theme's; our sortable headers


class _Page(HTMLParser):
    """Visible text (entities decoded, as a browser shows it) and every event-handler, autofocus or tabindex."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.text: list[str] = []
        self.risky: list[tuple[str, str, str]] = []
        self.scripts: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        for name, value in attrs:
            if name.startswith("on") or name in ("autofocus", "tabindex"):
                self.risky.append((tag, name, value or ""))
            if tag == "script" and name == "src" and value:
                self.scripts.append(value)

    def handle_data(self, data: str) -> None:
        self.text.append(data)


def _parse(path: Path) -> _Page:
    page = _Page()
    page.feed(path.read_text(encoding="utf-8"))
    return page


def test_md_text_escapes_attribute_lists_for_python_markdown() -> None:
    import markdown  # the reference renderer MkDocs uses (Python-Markdown), with attr_list on as the worst case

    payload = PAYLOADS["title"][0]
    assert md_text(payload) == "Logos \\{ tabindex=1 autofocus=1 onfocus=document.body.remove() \\}"
    for line in (f"# {md_text(payload)}", f"| a |\n|---|\n| {md_text(payload)} |", md_text("~~~ {onclick=x}")):
        rendered = markdown.markdown(line, extensions=["attr_list", "tables", "fenced_code", "toc"])
        assert "onfocus=" not in rendered.replace("onfocus=document", "") and 'autofocus="' not in rendered
        assert "<pre" not in rendered and 'onclick="' not in rendered
    assert "\x02" not in md_text("a\x02b\x03c")  # Python-Markdown's placeholder markers cannot be forged


def test_no_event_handler_or_autofocus_in_any_built_file(built: Path) -> None:
    html_dir = built / "html"
    found = {}
    for path in sorted(html_dir.rglob("*.html")):
        risky = [a for a in _parse(path).risky if a not in TEMPLATE_ATTRIBUTES]
        if risky:
            found[str(path.relative_to(html_dir))] = risky
    assert found == {}
    import xml.etree.ElementTree as ET

    for path in sorted(html_dir.rglob("*.svg")):
        for element in ET.parse(path).iter():
            assert not element.tag.endswith("script") and element.tag.endswith(
                ("svg", "title", "rect", "text", "tspan", "a", "line", "polyline", "polygon", "path", "g", "circle")
            ), (path.name, element.tag)
            assert not [a for a in element.attrib if a.lower().startswith("on")], (path.name, element.attrib)
    assert len(list(html_dir.rglob("*.html"))) >= 20


@pytest.mark.parametrize("field", sorted(PAYLOADS))
def test_payload_is_shown_as_text(built: Path, field: str) -> None:
    text, page = PAYLOADS[field]
    parsed = _parse(built / "html" / page)
    assert text in " ".join("".join(parsed.text).split()), f"{field} is not shown literally on {page}"
    assert [a for a in parsed.risky if a not in TEMPLATE_ATTRIBUTES] == []


def test_links_keep_only_plain_urls(built: Path) -> None:
    markdown = (built / "docs" / "tests" / "hostile-names.md").read_text(encoding="utf-8")
    assert "https://wiki.example/logos" in markdown and "https://wiki.example/доставка" in markdown
    assert "alert(25)" not in markdown  # a URL holding braces is dropped


def test_slugs_are_unicode_and_file_safe() -> None:
    # Latin with diacritics, Cyrillic and CJK keep their letters; other names get a stable hash suffix
    assert slug("über") == "über" and slug("доставка") == "доставка" and slug("配送") == "配送"
    outside = slug("../../../../../../outside")
    assert re.fullmatch(r"outside-[0-9a-f]{10}", outside) and outside == slug("../../../../../../outside")
    assert slug("Outside") != slug("outside") == "outside"
    assert re.fullmatch(r"label-[0-9a-f]{10}", slug("🎉")) and slug("🎉") != slug("🎈")
    long = slug("word " * 40)
    assert len(long) <= 71 and "/" not in long


def test_builder_refuses_paths_outside_the_folder(tmp_path: Path) -> None:
    assert inside(tmp_path, "docs/a.md") == (tmp_path / "docs" / "a.md").resolve()
    for rel in ("../x.svg", "docs/../../x.svg", "/etc/x", "docs/tests/a-segments-../../../../x.svg"):
        with pytest.raises(OutsideBuild):
            inside(tmp_path, rel)
    (tmp_path / "elsewhere").mkdir()
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "docs").symlink_to(tmp_path / "elsewhere")
    with pytest.raises(OutsideBuild):
        inside(tmp_path / "out", "docs/index.md")


def _tree(folder: Path, skip: Path) -> dict[str, str]:
    import hashlib

    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file() and skip not in p.parents
    }


def test_arm_name_cannot_write_outside_the_build(built: Path, tmp_path: Path) -> None:
    records = tmp_path / "records"
    shutil.copytree(FIXTURE, records)
    (tmp_path / "a" / "b").mkdir(parents=True)
    (tmp_path / "a" / "b" / "outside.svg").write_text("the user's file\n")
    out = tmp_path / "a" / "b" / "c" / "out"
    before = _tree(tmp_path, out)
    build_site(records, out, "Fixture archive", run_mkdocs=False)
    assert _tree(tmp_path, out) == before  # checksums of everything outside the build folder are unchanged
    assert not list(tmp_path.rglob("*segments-..*"))
    charts = sorted(p.name for p in (out / "docs" / "tests").glob("hostile-names-segments-*.svg"))
    assert charts == [f"hostile-names-segments-{slug('../../../../../../outside')}.svg"]
    assert [p.name for p in (built / "html" / "tests").glob("hostile-names-segments-*.svg")] == charts


def test_labels_in_cyrillic_and_cjk_get_pages(built: Path) -> None:
    html_dir = built / "html"
    assert (html_dir / "themes" / "доставка.html").is_file() and (html_dir / "tags" / "配送.html").is_file()
    assert (html_dir / "tags" / "über.html").is_file()
    test_page = (html_dir / "tests" / "hostile-names.html").read_text(encoding="utf-8")
    for path in ("../themes/доставка.html", "../tags/配送.html"):
        assert f'href="{urllib.parse.quote(path)}"' in test_page or f'href="{path}"' in test_page
    assert "доставка" in "".join(_parse(html_dir / "themes" / "доставка.html").text)


# --- the build folder belongs to the site ----------------------------------------------------------------


def test_out_folder_with_other_files_is_refused(site_dirs: tuple[Path, Path], tmp_path: Path) -> None:
    records = site_dirs[0]
    out = tmp_path / "mine"
    (out / "docs").mkdir(parents=True)
    (out / "notes.txt").write_text("keep me\n")
    (out / "docs" / "draft.md").write_text("my draft\n")
    assert CliRunner().invoke(app, ["index", "--records", str(records)]).exit_code == 0  # the CLI reads a store
    before = _tree(tmp_path, tmp_path / "store")  # the store is not a user file
    with pytest.raises(NotSiteFolder, match="--force"):
        build_site(records, out, run_mkdocs=False)
    assert _tree(tmp_path, tmp_path / "store") == before
    result = CliRunner().invoke(app, ["site", "build", "--out", str(out), "--records", str(records)])
    assert result.exit_code == 2 and "did not write" in result.output and "Traceback" not in result.output
    assert _tree(tmp_path, tmp_path / "store") == before
    report = build_site(records, out, run_mkdocs=False, force=True)
    assert (out / MARKER).is_file() and (out / "notes.txt").read_text() == "keep me\n"
    assert "draft.md" in report.removed  # --force: docs/ is the site's now
    (tmp_path / "file").write_text("x")
    with pytest.raises(NotSiteFolder):
        build_site(records, tmp_path / "file", run_mkdocs=False)


def test_empty_or_own_folder_is_accepted(site_dirs: tuple[Path, Path], tmp_path: Path) -> None:
    records = site_dirs[0]
    (tmp_path / "empty").mkdir()
    build_site(records, tmp_path / "empty", run_mkdocs=False)
    again = build_site(records, tmp_path / "empty", run_mkdocs=False)  # the marker says the folder is ours
    assert again.written == []


def _break_home_page(monkeypatch: pytest.MonkeyPatch) -> None:
    original = pages.home_page
    monkeypatch.setattr(pages, "home_page", lambda data: original(data) + "\n[gone](no-such-page.md)\n")


def test_failed_build_keeps_the_old_site(site_dirs: tuple[Path, Path], tmp_path: Path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    records = site_dirs[0]
    out = tmp_path / "out"
    build_site(records, out, "Fixture archive")
    before = snapshot(out / "html")
    _break_home_page(monkeypatch)
    with pytest.raises(MkDocsProblems, match="no-such-page"):
        build_site(records, out, "Fixture archive")
    assert snapshot(out / "html") == before
    assert sorted(p.name for p in out.iterdir()) == [".archive-site", "docs", "html", "mkdocs.yml"]
    assert CliRunner().invoke(app, ["index", "--records", str(records)]).exit_code == 0
    result = CliRunner().invoke(app, ["site", "build", "--out", str(out), "--records", str(records)])
    assert result.exit_code == 1 and "no-such-page" in result.output
    assert snapshot(out / "html") == before


# --- serving ------------------------------------------------------------------------------------------------


def test_serve_reports_a_busy_port_in_one_line(built: Path) -> None:
    with socket.socket() as busy:
        busy.bind(("127.0.0.1", 0))
        busy.listen()
        port = busy.getsockname()[1]
        with pytest.raises(ServeProblem, match="in use"):
            open_server(built / "html", port)
        result = CliRunner().invoke(app, ["site", "serve", "--out", str(built), "--port", str(port)])
    assert result.exit_code == 2 and "Traceback" not in result.output
    assert result.output.strip().splitlines() == [
        f"error: port {port} on 127.0.0.1 is in use: stop the other server or choose --port"
    ]


def test_serve_reports_a_build_problem_in_one_line(site_dirs: tuple[Path, Path], monkeypatch) -> None:  # type: ignore[no-untyped-def]
    records, out = site_dirs
    _break_home_page(monkeypatch)
    assert CliRunner().invoke(app, ["index", "--records", str(records)]).exit_code == 0
    result = CliRunner().invoke(app, ["site", "serve", "--out", str(out), "--records", str(records), "--port", "0"])
    lines = result.output.strip().splitlines()
    assert result.exit_code == 1 and len(lines) == 1 and "Traceback" not in result.output
    assert lines[0].startswith("error: the site did not build: MkDocs:") and "no-such-page" in lines[0]


def test_serve_lists_no_directories(built: Path) -> None:
    server = open_server(built / "html", 0)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    base = f"http://127.0.0.1:{server.server_address[1]}"
    try:
        with urllib.request.urlopen(f"{base}/index.html") as response:
            assert response.status == 200
        with urllib.request.urlopen(f"{base}/tests/") as response:  # a folder with an index page shows it
            assert b"Every filed test, newest first." in response.read()
        for folder in ("/assets/", "/reference/", "/tags/"):
            assert (built / "html" / folder.strip("/")).is_dir()
            with pytest.raises(urllib.error.HTTPError) as caught:
                urllib.request.urlopen(f"{base}{folder}")
            assert caught.value.code == 404 and b"Directory listing" not in caught.value.read()
    finally:
        server.shutdown()
        server.server_close()


_RISKY_JS = """
return Array.from(document.querySelectorAll('*')).flatMap(e => Array.from(e.attributes)
  .filter(a => a.name.startsWith('on') || a.name === 'autofocus' || a.name === 'tabindex')
  .map(a => [e.tagName.toLowerCase(), a.name, a.value]));
"""


def test_browser_runs_no_record_text(browser, served: str, built: Path) -> None:  # type: ignore[no-untyped-def]
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support import expected_conditions as ec
    from selenium.webdriver.support.ui import WebDriverWait

    driver = browser
    html_dir = built / "html"
    visited = 0
    for path in sorted(html_dir.rglob("*.html")):
        rel = urllib.parse.quote(path.relative_to(html_dir).as_posix())
        driver.get(f"{served}/{rel}")
        found = [tuple(a) for a in driver.execute_script(_RISKY_JS)]
        assert [a for a in found if a not in TEMPLATE_ATTRIBUTES] == [], rel
        # the title payload removes the page body when it gains focus; nothing of ours may take focus on load
        assert driver.execute_script("return document.body !== null && document.activeElement === document.body")
        visited += 1
    assert visited >= 20
    driver.get(f"{served}/tests/hostile-names.html")
    assert driver.find_element(By.TAG_NAME, "h1").text == PAYLOADS["title"][0]
    driver.find_element(By.LINK_TEXT, "доставка").click()
    WebDriverWait(driver, 10).until(ec.title_contains("доставка"))
    assert "Every archived test of this theme, pooled." in driver.page_source
    driver.get(f"{served}/tests/hostile-names.html")
    driver.execute_script("arguments[0].click()", driver.find_element(By.LINK_TEXT, "配送"))  # under the sidebar
    WebDriverWait(driver, 10).until(ec.title_contains("配送"))
    assert driver.find_elements(By.PARTIAL_LINK_TEXT, "Logos {")
    # the search box shows record text from its index: it must arrive as text too
    _search(driver, f"{served}/index.html", "logos", "tests/hostile-names")
    found = [tuple(a) for a in driver.execute_script(_RISKY_JS)]
    assert [a for a in found if a not in TEMPLATE_ATTRIBUTES] == []
    assert driver.execute_script("return document.body !== null")


def test_site_title_is_escaped_in_the_config() -> None:
    import html

    import yaml  # PyYAML, the loader MkDocs reads its configuration with

    from archive.site.build import mkdocs_config

    title = "<b onmouseover=alert(1)>Brindlewick</b> \"Home\" 'archive' { autofocus }"
    assert yaml.safe_load(mkdocs_config(title))["site_name"] == html.escape(title)
