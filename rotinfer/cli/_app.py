"""The ``rotinfer`` command group, its global options and exit-code policy.

Exit codes (documented in the README):

* 0 — success;
* 2 — bad input, bad configuration or bad usage (one-line message, no traceback);
* 1 — internal error (one-line message with a hint to report it; ``-v`` shows the traceback);
* 130 — interrupted (Ctrl-C).
"""

from __future__ import annotations

import importlib
import importlib.util
import logging
import sys
import traceback
from dataclasses import dataclass

import click

from .. import __version__
from ..errors import ConfigError, InputError, RotinferError

EXIT_OK = 0
EXIT_INTERNAL = 1
EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130

log = logging.getLogger("rotinfer")


@dataclass(frozen=True)
class Settings:
    """Global command-line settings every subcommand can read from ``ctx.obj``."""

    quiet: bool = False
    verbose: int = 0

    @property
    def show_progress(self) -> bool:
        """Progress bars only on an interactive terminal and when not quiet."""
        return (not self.quiet) and sys.stderr.isatty()

    def echo(self, message: str = "") -> None:
        """Print a result line to standard output unless ``--quiet``."""
        if not self.quiet:
            click.echo(message)


# Subcommands: name -> (module, one-line help). Modules are imported only when their command
# runs, so ``rotinfer --help`` and input errors answer in well under a second instead of
# paying for SciPy, matplotlib and celerite2 imports (each module registers on ``cli``).
COMMANDS: dict[str, tuple[str, str]] = {
    "demo": ("rotinfer.cli.demo", "Run the whole pipeline on an invented demo star."),
    "fit": ("rotinfer.cli.fit", "Infer rotation periods with the Gaussian-process model."),
    "report": ("rotinfer.cli.report", "Build the HTML pages for a results folder."),
    "scan": ("rotinfer.cli.scan", "Lomb-Scargle and autocorrelation periods per star."),
    "simulate": ("rotinfer.cli.simulate", "Simulate spotted, flaring stars with known truth."),
    "survey": ("rotinfer.cli.survey", "Analyse many stars, resumable, locally or on Dask."),
}


class _LazyGroup(click.Group):
    """A click group that imports a subcommand's module only when it is used."""

    def list_commands(self, ctx):
        return sorted(set(super().list_commands(ctx)) | {
            n for n, (mod, _) in COMMANDS.items() if importlib.util.find_spec(mod) is not None
        })

    def get_command(self, ctx, cmd_name):
        if cmd_name not in self.commands and cmd_name in COMMANDS:
            module = COMMANDS[cmd_name][0]
            if importlib.util.find_spec(module) is not None:
                importlib.import_module(module)
        return self.commands.get(cmd_name)

    def format_commands(self, ctx, formatter):
        rows = [(name, COMMANDS[name][1] if name in COMMANDS and name not in self.commands
                 else self.commands[name].get_short_help_str(80))
                for name in self.list_commands(ctx)]
        if rows:
            with formatter.section("Commands"):
                formatter.write_dl(rows)


@click.group(
    cls=_LazyGroup,
    context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100},
)
@click.option("-q", "--quiet", is_flag=True, help="Print nothing but errors.")
@click.option("-v", "--verbose", count=True, help="More detail (repeat for debug output).")
@click.version_option(__version__, "--version", prog_name="rotinfer")
@click.pass_context
def cli(ctx: click.Context, quiet: bool, verbose: int) -> None:
    """Measure stellar rotation periods from light curves.

    rotinfer fits a quasi-periodic Gaussian-process rotation model to each light
    curve, samples the period, spot coherence time and amplitude, and reports
    credible intervals, detection, harmonic warnings and convergence diagnostics
    beside the classic Lomb-Scargle and autocorrelation answers.

    Exit codes: 0 ok, 2 bad input or usage, 1 internal error, 130 interrupted.
    """
    level = logging.WARNING
    if quiet:
        level = logging.ERROR
    elif verbose == 1:
        level = logging.INFO
    elif verbose >= 2:
        level = logging.DEBUG
    logging.basicConfig(level=level, format="rotinfer: %(message)s", stream=sys.stderr)
    log.setLevel(level)
    ctx.obj = Settings(quiet=quiet, verbose=verbose)


def _error(message: str) -> None:
    # One line, always: collapse any newline a library put in its message.
    click.echo("rotinfer: error: " + " ".join(str(message).split()), err=True)


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``rotinfer`` console script; returns the exit code."""
    args = sys.argv[1:] if argv is None else list(argv)
    verbose = any(a in ("-v", "-vv", "-vvv", "--verbose") for a in args)
    try:
        rv = cli.main(args=args, prog_name="rotinfer", standalone_mode=False)
    except click.exceptions.Exit as exc:
        return int(exc.exit_code)
    except click.exceptions.Abort:
        _error("interrupted")
        return EXIT_INTERRUPTED
    except KeyboardInterrupt:
        _error("interrupted")
        return EXIT_INTERRUPTED
    except click.ClickException as exc:
        # Usage errors: click's own text, kept to one line.
        _error(exc.format_message())
        return EXIT_BAD_INPUT
    except (InputError, ConfigError) as exc:
        _error(str(exc))
        return EXIT_BAD_INPUT
    except RotinferError as exc:
        _error(str(exc))
        return EXIT_INTERNAL
    except Exception as exc:
        if verbose:
            traceback.print_exc()
        _error(
            f"internal error: {type(exc).__name__}: {exc} "
            "(this is a bug in rotinfer; rerun with -v and please report the output)"
        )
        return EXIT_INTERNAL
    return int(rv or 0)
