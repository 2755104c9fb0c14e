"""The ``synthgen`` command: parse, call one library function, report.

Results go to stdout, progress and errors to stderr.  Exit codes: 0 done,
1 unexpected failure, 2 bad input (config, option or file), with a one-line
message naming the key or file, the rule and the value.
"""

import os
import sys
from typing import Annotated

import typer

from synthgen.cli import boxes, cases, make, page, probe, tokens, view
from synthgen.cli._common import APP_SETTINGS, _Command, _Group

__all__ = ["RUNS_YOUR_CODE", "app", "main", "one_blas_thread"]

app = typer.Typer(
    name="synthgen",
    help="Object-detection test data whose right answer is known exactly.",
    cls=_Group,
    **APP_SETTINGS,
)


def _version(value: bool) -> None:
    if value:
        from synthgen import __version__

        typer.echo(f"synthgen {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: Annotated[
        bool, typer.Option("--version", callback=_version, is_eager=True, help="Print the version and exit.")
    ] = False,
) -> None:
    """Object-detection test data whose right answer is known exactly."""



#: Every command, in the order ``synthgen --help`` lists them; a new command is one line here.
COMMANDS = (
    make.make,
    boxes.jitter,
    boxes.score,
    page.report,
    view.check,
    make.export,
    make.sweep,
    make.merge,
    view.show,
    view.stats,
    probe.probe,
    cases.cases,
    cases.conform,
)
for _command in COMMANDS:
    app.command(cls=_Command)(_command)

#: Command groups: ``synthgen NAME COMMAND``.
app.add_typer(tokens.app, name="tokens")


#: Commands that run the user's own code (a detector, an evaluator): BLAS threads stay as the user set them.
RUNS_YOUR_CODE = frozenset({"probe", "conform"})


def one_blas_thread(argv: list[str]) -> None:
    """Run numpy's BLAS on one thread for synthgen's own commands, unless the environment says otherwise.

    Starting OpenBLAS's thread pool costs about 0.1 s of CPU and of wall time at
    every numpy import (a whole one-image ``make`` takes about 0.25 s without
    it), in this process and in every worker process; synthgen's matrix products
    are 2x2 to 8x3, far below the size where a second thread helps.
    Only the thread count of the BLAS changes, never a value.  Call it before
    numpy is imported; commands in :data:`RUNS_YOUR_CODE` are left alone.
    """
    words = [a for a in argv if not a.startswith("-")]
    if words and words[0] in RUNS_YOUR_CODE:
        return
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")


def main() -> None:
    """Entry point of the ``synthgen`` console script.

    Usage mistakes caught by the option parser (an unknown option, a value of
    the wrong type) are printed as one line, like every other user error.
    """
    one_blas_thread(sys.argv[1:])
    try:
        code = app(prog_name="synthgen", standalone_mode=False)
    except typer.TyperException as exc:  # the parser's usage errors
        text = exc.format_message() if hasattr(exc, "format_message") else str(exc)
        ctx = getattr(exc, "ctx", None)
        if ctx is not None and text == ctx.get_help():  # a command group called bare: its help, whole
            typer.echo(text, err=True)
            text = ""
        text = " ".join(text.split()).rstrip(".")
        if text:
            help_ = f"see '{ctx.command_path} --help'" if ctx is not None else ""
            # after a question ("Did you mean 'make'?") the pointer to the help goes in brackets
            where = "" if not help_ else f" ({help_})" if text.endswith("?") else f"; {help_}"
            typer.echo(f"synthgen: error: {text}{where}", err=True)
        sys.exit(getattr(exc, "exit_code", 2))
    except typer.Abort:
        typer.echo("synthgen: interrupted", err=True)
        sys.exit(130)
    sys.exit(code if isinstance(code, int) else 0)


if __name__ == "__main__":  # pragma: no cover
    main()

