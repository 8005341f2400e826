"""The ``morpho`` command: one click group, one module per subcommand."""

from __future__ import annotations

from .._runtime import pin_numeric_threads, retain_freed_memory

# Before anything imports numpy: compute like a Dask worker, and reuse memory between tiles
# (see morpho._runtime).
pin_numeric_threads()
retain_freed_memory()

import importlib  # noqa: E402
import logging  # noqa: E402
import sys  # noqa: E402

import click  # noqa: E402

from .. import __version__  # noqa: E402
from ..errors import MorphoError  # noqa: E402

__all__ = ["cli", "main"]

#: subcommand name -> module in morpho.cli holding a click command called ``command``
SUBCOMMANDS = {
    "survey": "survey",
    "measure": "measure",
    "contrast": "contrast",
    "export": "export",
    "synth": "synth",
    "train": "train",
    "report": "report",
}


class _Group(click.Group):
    """Lazy subcommand loading, and one-line errors instead of tracebacks."""

    def list_commands(self, ctx):
        return list(SUBCOMMANDS)

    def get_command(self, ctx, name):
        if name not in SUBCOMMANDS:
            return None
        module = importlib.import_module(f"morpho.cli.{SUBCOMMANDS[name]}")
        return module.command

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except MorphoError as err:
            verbose = (ctx.obj or {}).get("verbose", 0)
            if verbose:
                logging.getLogger("morpho").exception("failed")
            click.echo(f"morpho: error: {err}", err=True)
            ctx.exit(err.exit_code)
        except (click.exceptions.ClickException, click.exceptions.Exit, click.exceptions.Abort):
            raise
        except Exception as err:  # noqa: BLE001 - never a bare traceback for a user
            verbose = (ctx.obj or {}).get("verbose", 0)
            if verbose:
                logging.getLogger("morpho").exception("failed")
            first = str(err).splitlines()[0] if str(err) else ""
            click.echo(f"morpho: internal error: {type(err).__name__}: {first} "
                       "(rerun with -v for the traceback and report it)", err=True)
            ctx.exit(1)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="morpho")
@click.option("-v", "--verbose", count=True, help="More log output (-vv for debug); full tracebacks on error.")
@click.option("-q", "--quiet", is_flag=True, help="Only warnings and errors.")
@click.pass_context
def cli(ctx, verbose, quiet):
    """morpho: measure crater shapes on planetary DEMs, compare them with published impact
    scaling laws, score their morphological similarity to impact craters versus laboratory
    electrode-spot craters, and test crater populations statistically.

    The hypothesis score measures morphological similarity under stated assumptions, not
    mechanism. Impact is the consensus origin of planetary craters.
    """
    level = logging.WARNING if quiet else (logging.DEBUG if verbose > 1 else logging.INFO)
    # Third-party libraries stay at WARNING unless -vv; morpho's own logger follows -v/-q.
    logging.basicConfig(level=logging.DEBUG if verbose > 1 else logging.WARNING,
                        format="%(levelname)s %(name)s: %(message)s", stream=sys.stderr)
    logging.getLogger("morpho").setLevel(level)

    ctx.ensure_object(dict)
    ctx.obj["verbose"] = verbose
    ctx.obj["quiet"] = quiet


def main():  # pragma: no cover - console entry point
    cli(prog_name="morpho")


if __name__ == "__main__":  # pragma: no cover - `python -m morpho.cli.main`
    main()
