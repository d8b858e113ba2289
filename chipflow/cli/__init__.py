"""The ``chipflow`` command line: thin commands that parse, call one library function, print.

Bad input never shows a traceback: any :class:`~chipflow.errors.ChipflowError` and any usage
mistake becomes one line on stderr and exit status 2.
"""

from __future__ import annotations

import importlib
import sys

import click

from chipflow import __version__
from chipflow.errors import ChipflowError

__all__ = ["main"]


#: Longest error line printed [characters]; messages quote user text, which may be huge.
MAX_MESSAGE = 500


def _one_line(text: str) -> str:
    line = " ".join(str(text)[: 4 * MAX_MESSAGE].split())
    return line if len(line) <= MAX_MESSAGE else line[: MAX_MESSAGE - 3] + "..."


class _Group(click.Group):
    """A command group that reports bad input in one line and exits with status 2.

    Commands are imported when they are used, so ``chipflow channel`` loads the duct formulas
    and never the drawing, the mask writers or the plotting library.
    """

    #: Command name -> (module, attribute), in the order of ``chipflow --help``.
    lazy = {
        "channel": ("chipflow.cli.channel", "command"),
        "size": ("chipflow.cli.size", "command"),
        "check": ("chipflow.cli.check", "command"),
        "build": ("chipflow.cli.build", "command"),
        "new": ("chipflow.cli.new", "command"),
        "designs": ("chipflow.cli.designs", "command"),
        "analyse": ("chipflow.cli.analyse", "command"),
        "vary": ("chipflow.cli.vary", "command"),
        "sweep": ("chipflow.cli.sweep", "command"),
        "cache": ("chipflow.cli.cache", "command"),
        "demo": ("chipflow.cli.build", "demo_command"),
    }

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted({*self.lazy, *self.commands})

    def get_command(self, ctx: click.Context, name: str) -> click.Command | None:
        if name not in self.commands and name in self.lazy:
            module, attribute = self.lazy[name]
            self.add_command(getattr(importlib.import_module(module), attribute), name)
        return self.commands.get(name)

    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True, **extra):
        try:
            result = super().main(
                args=args, prog_name=prog_name or "chipflow", standalone_mode=False, **extra
            )
        except click.exceptions.Abort:
            click.echo("chipflow: aborted", err=True)
            sys.exit(130)
        except click.ClickException as exc:
            click.echo(f"chipflow: error: {_one_line(exc.format_message())}", err=True)
            sys.exit(2)
        except ChipflowError as exc:
            click.echo(f"chipflow: error: {_one_line(exc)}", err=True)
            sys.exit(2)
        except OSError as exc:  # the system refused something the library did not expect
            text = f"{exc.filename}: " if exc.filename else ""
            text += exc.strerror or str(exc)
            click.echo(f"chipflow: error: {_one_line(text)}", err=True)
            sys.exit(2)
        if not standalone_mode:
            return result
        sys.exit(result if isinstance(result, int) else 0)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(
    __version__, "--version", prog_name="chipflow", message="%(prog)s %(version)s"
)
def main() -> None:
    """Design, check and draw branching perfusion networks for organ-on-chip devices.

    \b
    Example:
      chipflow channel --width 200um --depth 50um --length 10mm --flow 5uL/min
    """
