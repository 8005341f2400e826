"""Placeholder for subcommands whose capability is not built yet."""

from __future__ import annotations

import click


def not_available(name: str, what: str) -> click.Command:
    """A subcommand that exits with a clear 'not available yet' message (exit code 4)."""

    @click.command(name=name, help=f"{what}\n\nNot available yet in this version of morpho.",
                   context_settings={"ignore_unknown_options": True})
    @click.argument("args", nargs=-1, type=click.UNPROCESSED)
    def _cmd(args):
        click.echo(f"morpho {name}: not available yet in this version.", err=True)
        raise SystemExit(4)

    return _cmd
