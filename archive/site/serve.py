"""Serving the built site on localhost: files only (no directory listings), problems as one line."""

from __future__ import annotations

import errno
import functools
import http.server
from pathlib import Path

from archive.site.engine import MkDocsProblems


class ServeProblem(ValueError):
    """The server cannot start (the port is busy or cannot be used)."""


class FilesOnly(http.server.SimpleHTTPRequestHandler):
    """Serves the files of the site; a folder without an index page is "not found", never a listing."""

    def list_directory(self, path: str | Path) -> None:  # type: ignore[override]
        self.send_error(404, "Not found")
        return None


def open_server(html_dir: Path, port: int, host: str = "127.0.0.1") -> http.server.ThreadingHTTPServer:
    """A server bound to ``host:port`` for the files of ``html_dir`` (which may be built after binding).
    Raises :class:`ServeProblem` with a one-line reason when the port cannot be used."""
    handler = functools.partial(FilesOnly, directory=str(html_dir))
    try:
        return http.server.ThreadingHTTPServer((host, port), handler)
    except OverflowError:
        raise ServeProblem(f"port {port} is not a port number (0 to 65535)") from None
    except OSError as exc:
        if exc.errno == errno.EADDRINUSE:
            raise ServeProblem(f"port {port} on {host} is in use: stop the other server or choose --port") from None
        raise ServeProblem(f"cannot serve on {host}:{port}: {exc.strerror or exc}") from None


def build_problem_line(exc: MkDocsProblems) -> str:
    """MkDocs' warnings as one line: how many, and the first."""
    first = " ".join(exc.messages[0].split()) if exc.messages else "no message"
    more = f" (and {len(exc.messages) - 1} more; `archive site build` lists them)" if len(exc.messages) > 1 else ""
    return f"the site did not build: MkDocs: {first}{more}"
