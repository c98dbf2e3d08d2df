"""The `archive` command line."""

from __future__ import annotations

import typer

from archive.cli import analyze, catalog, planning, pool, records, site

app = typer.Typer(
    name="archive",
    help="A knowledge base of finished A/B tests: file, check, index, find and analyse them.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
app.command("check")(records.check)
app.command("new")(records.new)
app.command("schema")(records.schema)
app.command("index")(catalog.index)
app.command("list")(catalog.list_tests)
app.command("search")(catalog.search)
app.command("show")(catalog.show)
app.command("analyze")(analyze.analyze)
app.command("pool")(pool.pool)
app.command("prior")(planning.prior)
app.command("plan")(planning.plan)
app.command("calibrate")(planning.calibrate)
app.add_typer(site.app, name="site")


def main() -> None:
    app()


if __name__ == "__main__":
    main()
