"""The site commands: build the archive's website, serve it locally."""

from __future__ import annotations

import contextlib
from pathlib import Path
from typing import Annotated

import typer

from archive.cli.common import (
    DbOption,
    NoSyncOption,
    RecordsOption,
    err,
    open_archive,
    ready,
    show_progress,
    user_errors,
)

app = typer.Typer(help="Publish the archive as a browsable site (MkDocs).", no_args_is_help=True)

OutOption = Annotated[Path, typer.Option("--out", help="Output folder (docs/, mkdocs.yml, html/).")]
ForceOption = Annotated[
    bool, typer.Option("--force", help="Build in an --out folder that holds files the site did not write.")
]


@app.command("build")
def build(
    out: OutOption = Path("site-build"),
    title: Annotated[str, typer.Option(help="Site title.")] = "Test archive",
    records: RecordsOption = None,
    db: DbOption = None,
    no_sync: NoSyncOption = False,
    force: ForceOption = False,
) -> None:
    """Generate Markdown and SVG from the store and build the HTML site."""
    from archive.site.engine import MkDocsProblems

    with user_errors():
        archive = open_archive(records, db, no_sync)
        ready(archive)
        try:
            report = archive.build_site(
                out, title, progress=(lambda m: err.print(m)) if show_progress() else None, force=force
            )
        except MkDocsProblems as exc:
            for message in exc.messages:
                err.print(f"mkdocs: {message}", markup=False)
            raise typer.Exit(1) from None
    err.print(
        f"{report.pages} pages ({len(report.written)} files written, {len(report.removed)} removed) "
        f"in {report.generate_seconds:.1f} s + MkDocs "
        f"{report.mkdocs_seconds:.1f} s. Open {report.html}/index.html",
        markup=False,
    )


@app.command("serve")
def serve(
    out: OutOption = Path("site-build"),
    port: Annotated[int, typer.Option(help="Port on localhost.")] = 8000,
    records: RecordsOption = None,
    db: DbOption = None,
    no_sync: NoSyncOption = False,
    force: ForceOption = False,
) -> None:
    """Build, then serve the site on http://127.0.0.1:PORT until interrupted."""
    from archive.site.engine import MkDocsProblems
    from archive.site.serve import build_problem_line, open_server

    with user_errors():
        server = open_server(out / "html", port)  # a busy port is reported before any work
        try:
            archive = open_archive(records, db, no_sync)
            ready(archive)
            report = archive.build_site(out, force=force)
        except MkDocsProblems as exc:
            server.server_close()
            err.print(f"error: {build_problem_line(exc)}", markup=False)
            raise typer.Exit(1) from None
        except BaseException:
            server.server_close()
            raise
    with server:
        err.print(f"serving {report.html} at http://127.0.0.1:{port}/ (Ctrl-C to stop)", markup=False)
        with contextlib.suppress(KeyboardInterrupt):
            server.serve_forever()
