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
    assert again.written == [] and again.fresh_entries == 0
    path = records / "basket-bar-2.yaml"
    path.write_text(path.read_text().replace("The threshold bar helped most", "The threshold bar helped a lot"))
    changed = build_site(records, first, "Fixture archive")
    assert changed.fresh_entries == 1
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
# The only such attributes MkDocs' built-in theme writes (its search and keyboard dialogs): tabindex="-1".
TEMPLATE_ATTRIBUTES = {("div", "tabindex", "-1")}


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
                ("svg", "title", "rect", "text", "line", "polyline", "polygon", "path", "g", "circle")
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
    before = _tree(tmp_path, tmp_path / "none")
    with pytest.raises(NotSiteFolder, match="--force"):
        build_site(records, out, run_mkdocs=False)
    assert _tree(tmp_path, tmp_path / "none") == before
    result = CliRunner().invoke(app, ["site", "build", "--out", str(out), "--records", str(records)])
    assert result.exit_code == 2 and "did not write" in result.output and "Traceback" not in result.output
    assert _tree(tmp_path, tmp_path / "none") == before
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
    assert sorted(p.name for p in out.iterdir()) == [".archive-site", ".cache", "docs", "html", "mkdocs.yml"]
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
        for folder in ("/assets/", "/reference/", "/search/"):
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
    # the built-in search shows record text from its index: it must arrive as text too
    driver.get(f"{served}/index.html")
    driver.find_element(By.CSS_SELECTOR, "a[data-bs-target='#mkdocs_search_modal'], a[data-toggle='modal']").click()
    box = WebDriverWait(driver, 10).until(ec.visibility_of_element_located((By.ID, "mkdocs-search-query")))
    box.send_keys("logos")
    WebDriverWait(driver, 15).until(lambda d: d.find_elements(By.CSS_SELECTOR, "#mkdocs-search-results a"))
    found = [tuple(a) for a in driver.execute_script(_RISKY_JS)]
    assert [a for a in found if a not in TEMPLATE_ATTRIBUTES] == []
    assert driver.execute_script("return document.body !== null")


def test_site_title_is_escaped_in_the_config() -> None:
    import html

    import yaml  # PyYAML, the loader MkDocs reads its configuration with

    from archive.site.build import mkdocs_config

    title = "<b onmouseover=alert(1)>Brindlewick</b> \"Home\" 'archive' { autofocus }"
    assert yaml.safe_load(mkdocs_config(title))["site_name"] == html.escape(title)
