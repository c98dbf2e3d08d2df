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
app.command("themes")(catalog.labels)
app.command("analyze")(analyze.analyze)
app.command("pool")(pool.pool)
app.command("prior")(planning.prior)
app.command("plan")(planning.plan)
app.command("calibrate")(planning.calibrate)
app.add_typer(site.app, name="site")


def command() -> typer.core.TyperGroup:
    """The click command behind ``app``, with on/off flags shown without a value placeholder in help."""
    group = typer.main.get_command(app)
    _quiet_flags(group)
    return group  # type: ignore[return-value]


def _quiet_flags(cmd: object) -> None:
    for param in getattr(cmd, "params", []):
        if getattr(param, "is_flag", False):
            param.metavar = ""
    for sub in getattr(cmd, "commands", {}).values():
        _quiet_flags(sub)


def main() -> None:
    command()(prog_name="archive")


if __name__ == "__main__":
    main()
