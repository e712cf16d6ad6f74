"""Serve a built site on the loopback interface for a quick look in a browser."""

from __future__ import annotations

import functools
import http.server
from collections.abc import Callable
from pathlib import Path

from sitegen.errors import ConfigError

#: A small icon served at /favicon.ico when the site has none, so that a browser's console stays clean.
FAVICON = (
    b'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 16 16">'
    b'<rect width="16" height="16" rx="3" fill="#2b6a89"/>'
    b'<path d="M3 12 L13 4" stroke="#ffffff" stroke-width="2"/></svg>'
)


class _QuietHandler(http.server.SimpleHTTPRequestHandler):
    def log_message(self, format: str, *args: object) -> None:
        pass

    def do_GET(self) -> None:
        if self.path.split("?")[0] == "/favicon.ico" and not (Path(self.directory) / "favicon.ico").is_file():
            self.send_response(200)
            self.send_header("Content-Type", "image/svg+xml")
            self.send_header("Content-Length", str(len(FAVICON)))
            self.end_headers()
            self.wfile.write(FAVICON)
            return
        super().do_GET()


def make_server(site: Path, port: int) -> http.server.ThreadingHTTPServer:
    """A server bound to 127.0.0.1 only; port 0 picks a free port."""
    if not (site / "index.html").is_file():
        raise ConfigError(f"{site} has no index.html; build the site first")
    handler = functools.partial(_QuietHandler, directory=str(site))
    try:
        return http.server.ThreadingHTTPServer(("127.0.0.1", port), handler)
    except OSError as exc:
        raise ConfigError(f"cannot listen on 127.0.0.1:{port}: {exc.strerror or exc}", hint="try --port 0") from exc


def serve(site: Path, port: int, announce: Callable[[str], None]) -> None:
    """Serve until interrupted."""
    server = make_server(site, port)
    host, real_port = server.server_address[:2]
    announce(f"http://{host!s}:{real_port}/")
    try:
        server.serve_forever()
    finally:
        server.server_close()
