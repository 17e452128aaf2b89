"""fracto's command line: a thin click layer over the library.

Each command lives in its own module of this package; it parses, calls the
library and prints. Bad input (:class:`fracto.errors.FractoInputError`, click
usage errors) ends with one sentence on stderr and exit status 2; anything
else is an internal error, exit status 1 (set ``FRACTO_DEBUG=1`` for the
traceback).
"""

from __future__ import annotations

import os
import sys

import click

from fracto import __version__
from fracto.errors import FractoInputError


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="fracto")
def cli() -> None:
    """Quantitative fractography of SEM fractographs and height maps."""


#: One module of this package per command; each defines ``command``.
COMMAND_MODULES = (
    "measure",
    "synth",
    "classify",
    "train",
    "facets",
    "stereo",
    "crackpath",
    "batch",
    "transition",
    "suggest",
)


def _register() -> None:
    import importlib
    import importlib.util

    for name in COMMAND_MODULES:
        if importlib.util.find_spec(f"fracto.cli.{name}") is None:
            continue  # command not built yet
        module = importlib.import_module(f"fracto.cli.{name}")
        cli.add_command(module.command)


_register()


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``fracto`` console command; returns the exit status."""
    try:
        rv = cli.main(args=argv, prog_name="fracto", standalone_mode=False)
    except FractoInputError as exc:
        click.echo(f"fracto: {exc}", err=True)
        return 2
    except click.exceptions.Abort:
        click.echo("fracto: interrupted.", err=True)
        return 130
    except click.exceptions.ClickException as exc:
        # usage errors: unknown option, missing argument, bad choice, file not found
        msg = exc.format_message().strip().replace("\n", " ")
        click.echo(f"fracto: {msg}", err=True)
        return 2
    except KeyboardInterrupt:
        click.echo("fracto: interrupted.", err=True)
        return 130
    except Exception as exc:  # internal error: short message, traceback only on request
        if os.environ.get("FRACTO_DEBUG"):
            raise
        click.echo(
            f"fracto: internal error ({type(exc).__name__}: {exc}); "
            "set FRACTO_DEBUG=1 for the traceback.",
            err=True,
        )
        return 1
    return rv if isinstance(rv, int) else 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
