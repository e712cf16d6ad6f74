"""Pages load nothing from the network, whatever the data folder says (issue 12, item 4).

A hostile folder puts pictures with remote and protocol-relative addresses into its Markdown, and a theme of
its own loads a style sheet, a script, a picture and a font from a web server. A real HTTP listener on
127.0.0.1 (any port) stands in for that server; every page of the built site, and the single-file report from
``pack``, is opened in Chromium straight from disk, and the listener must have received no request at all,
while the site's own charts still draw under the pages' security policy.
"""

from __future__ import annotations

import http.server
import threading
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from conftest import cli, write_csv, write_toml

from sitegen.report.pages import render_markdown
from sitegen.report.policy import SITE_POLICY, with_policy

CHROMIUM = Path("/usr/bin/chromium")


def test_markdown_pictures_are_links_not_loads() -> None:
    html = str(render_markdown("![gauge](http://example.invalid/a.png) and ![](//example.invalid/b.png)"))
    assert "<img" not in html
    assert '<a href="http://example.invalid/a.png" class="image-link">image: gauge</a>' in html
    assert '<a href="//example.invalid/b.png" class="image-link">image: //example.invalid/b.png</a>' in html
    assert "<img" not in str(render_markdown('![x](javascript:alert(1) "t")'))


@pytest.mark.parametrize(
    "page",
    [
        "<!DOCTYPE html>\n<html>\n<head>\n<meta charset='utf-8'>\n<link rel=stylesheet href=x.css></head></html>",
        "<html><body><img src=http://x/a.png></body></html>",  # a theme that left out <head>
        "<img src=http://x/a.png>",
    ],
)
def test_the_policy_comes_before_anything_the_page_loads(page: str) -> None:
    out = with_policy(page)
    policy = out.index("Content-Security-Policy")
    assert all(policy < out.index(tag) for tag in ("<link", "<img") if tag in out)
    assert "default-src 'none'" in SITE_POLICY
    assert "'unsafe-eval'" not in SITE_POLICY


class _Recorder(http.server.BaseHTTPRequestHandler):
    seen: list[str]

    def do_GET(self) -> None:
        self.seen.append(self.path)
        self.send_response(200)
        self.send_header("Content-Type", "text/plain")
        self.end_headers()
        self.wfile.write(b"/* nothing */")

    def log_message(self, format: str, *args: Any) -> None:
        return


@pytest.fixture
def listener() -> Iterator[tuple[str, list[str]]]:
    """An HTTP server on 127.0.0.1 recording every path it is asked for."""
    seen: list[str] = []
    handler = type("Handler", (_Recorder,), {"seen": seen})
    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"127.0.0.1:{server.server_address[1]}", seen
    finally:
        server.shutdown()
        server.server_close()
        thread.join()


def _hostile_folder(data: Path, host: str) -> None:
    write_toml(
        data / "site.toml",
        {
            "title": "Plant records",
            "description": f"![logo](http://{host}/site-logo.png) and ![badge](//{host}/badge.svg)",
            "theme": "_theme",
        },
    )
    write_csv(data / "flow.csv", "x,y\n1,2.1\n2,3.9\n3,6.2\n4,7.8\n5,10.1\n6,11.8\n")
    write_toml(
        data / "flow.toml",
        {"description": f"See ![chart](http://{host}/chart.png) <img src='http://{host}/raw.png'>", "tags": ["a"]},
    )
    write_csv(data / "level.csv", "x,y\n1,1.1\n2,1.9\n3,3.2\n4,3.8\n5,5.1\n")
    write_toml(data / "level.toml", {"tags": ["a"]})
    theme = data / "_theme"
    (theme / "static").mkdir(parents=True)
    (theme / "static" / "style.css").write_text(
        f"@import url(http://{host}/import.css);\n"
        f"body {{ background: url(//{host}/bg.png); }}\n"
        f"@font-face {{ font-family: x; src: url(http://{host}/font.woff2); }}\n"
        "p { font-family: x; }\n",
        encoding="utf-8",
    )
    (theme / "static" / "theme.js").write_text(f"location.href = 'http://{host}/script-ran';\n", encoding="utf-8")
    (theme / "static" / "page.html").write_text(f"<img src='http://{host}/page.png'>", encoding="utf-8")
    (theme / "templates").mkdir()
    (theme / "templates" / "index.html").write_text(
        '{% extends "base.html" %}\n{% block main %}'
        f'<img src="http://{host}/theme.png"><link rel="stylesheet" href="http://{host}/theme.css">'
        f'<script src="http://{host}/theme.js"></script><iframe src="http://{host}/frame"></iframe>'
        f'<object data="http://{host}/object"></object><meta http-equiv="refresh" content="0;url=http://{host}/go">'
        '<script src="assets/theme.js"></script>'
        "{{ super() }}{% endblock %}\n",
        encoding="utf-8",
    )


@pytest.mark.browser
@pytest.mark.skipif(not CHROMIUM.is_file(), reason="Debian's Chromium is not at /usr/bin/chromium")
def test_a_hostile_site_requests_nothing_from_the_network(tmp_path: Path, listener: tuple[str, list[str]]) -> None:
    sync_api = pytest.importorskip("playwright.sync_api")
    host, seen = listener
    data, site = tmp_path / "data", tmp_path / "site"
    _hostile_folder(data, host)
    assert cli("build", data, "-o", site, "-q").code == 0
    single = tmp_path / "report.html"
    assert cli("pack", site, "-o", single).code == 0
    pages = [*sorted(site.rglob("*.html")), single]
    # A theme kept in the data folder publishes no scripts and no pages of its own; the rest of its files are used.
    assert not (site / "assets" / "theme.js").exists()
    assert not (site / "assets" / "page.html").exists()
    assert "@import" in (site / "assets" / "style.css").read_text("utf-8")
    assert all('http-equiv="refresh"' not in p.read_text("utf-8") for p in pages)
    assert all("Content-Security-Policy" in p.read_text("utf-8") for p in pages)
    drawn: dict[str, int] = {}
    with sync_api.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), headless=True)
        try:
            for path in pages:
                page = browser.new_page()
                page.goto(path.as_uri())
                page.wait_for_function(
                    "() => [...document.querySelectorAll('.vis')].every(v => v.classList.contains('drawn')"
                    " || v.textContent.includes('could not be drawn'))",
                    timeout=20_000,
                )
                page.wait_for_timeout(300)
                drawn[path.name if path == single else path.relative_to(site).as_posix()] = page.evaluate(
                    "() => document.querySelectorAll('.vis.drawn svg.marks').length"
                )
                page.close()
        finally:
            browser.close()
    # Control: the listener does answer (so "no request" means none was made).
    import urllib.request

    with urllib.request.urlopen(f"http://{host}/control") as answer:
        assert answer.status == 200
    assert seen == ["/control"]
    # The site's own charts still draw under the policy (five per dataset page, all of them in the single file).
    assert drawn["datasets/flow/index.html"] >= 4
    assert drawn["datasets/level/index.html"] >= 4
    assert drawn["report.html"] >= 8
