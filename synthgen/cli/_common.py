"""What the commands share: option types, help classes, error reporting, parsing helpers."""

from __future__ import annotations

import functools
import os
import sys
import traceback
import typing
from pathlib import Path
from typing import Annotated

import typer

from synthgen.cli._values import install, without_none
from synthgen.errors import UserError


class _Plain:
    """Help as people read it, and values converted without a model per option.

    A flag shows no value type (no '<bool>'), a repeatable option the type of one
    value, a bounded number its type (its bounds follow the help), and arguments
    are written in upper case, an optional one in brackets, in the usage line and
    in the arguments list.  Help is plain text (no rich panels: importing rich to
    draw them took longer than the command's work).  Each parameter gets the
    direct conversion of :mod:`synthgen.cli._values`.
    """

    def get_params(self, ctx):
        params = super().get_params(ctx)
        for p in params:
            install(p)
            if p.metavar is None and getattr(p, "is_flag", False):
                p.metavar = ""
            elif p.metavar is None and p.param_type_name == "argument":
                p.metavar = p.name.upper()
            elif p.metavar is None and getattr(p, "multiple", False):
                p.metavar = _one_value(p)
            elif p.metavar is None and getattr(getattr(p, "type_descriptor", None), "is_ranged", False):
                p.metavar = f"<{p.type_descriptor.ranged_type_name}>"  # not '<int range>': the range is in [...]
        return params

    def collect_usage_pieces(self, ctx):
        pieces = [self.options_metavar] if self.options_metavar else []
        for p in self.get_params(ctx):
            if p.param_type_name == "argument":
                name = p.metavar + ("..." if p.nargs != 1 else "")
                pieces.append(name if p.required else f"[{name}]")
        return pieces


class _Command(_Plain, typer.core.TyperCommand):
    pass


class _Group(_Plain, typer.core.TyperGroup):
    def collect_usage_pieces(self, ctx):
        return typer.core.TyperGroup.collect_usage_pieces(self, ctx)

    def format_commands(self, ctx, formatter):
        """Each command with the first sentence of its help, wrapped, never cut short."""
        rows = []
        for name in self.list_commands(ctx):
            cmd = self.get_command(ctx, name)
            if cmd is not None and not cmd.hidden:
                rows.append((name, cmd.get_short_help_str(limit=10_000)))
        if rows:
            with formatter.section("Commands"):
                formatter.write_dl(rows)


def _one_value(param) -> str:
    """The metavar of one value of a repeatable option: ``<str>`` for ``list[str]``."""
    args = typing.get_args(without_none(param.type_descriptor.annotation))
    return f"<{getattr(args[0], '__name__', 'value').lower()}>" if args else "<value>"


#: Settings every typer app of the command line shares: plain help, -h, no completion scripts.
APP_SETTINGS = {
    "add_completion": False,
    "no_args_is_help": True,
    "pretty_exceptions_enable": False,
    "rich_markup_mode": None,
    "context_settings": {"help_option_names": ["-h", "--help"]},
}


def _fail(message: str, code: int) -> None:
    typer.echo(f"synthgen: {message}", err=True)
    raise typer.Exit(code)


def reported(fn):
    """Turn user errors into one line and exit 2, other failures into one line and exit 1.

    ``SYNTHGEN_DEBUG=1`` adds the traceback of unexpected failures.
    """

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        try:
            return fn(*args, **kwargs)
        except UserError as exc:
            _fail(f"error: {exc}", 2)
        except (typer.Exit, typer.Abort, typer.TyperException):
            raise
        except KeyboardInterrupt:
            _fail("interrupted", 130)
        except BrokenPipeError:  # the reader of stdout went away (e.g. `| head`): stop quietly
            try:
                sys.stdout = open(os.devnull, "w")
            except OSError:
                pass
            raise typer.Exit(0) from None
        except Exception as exc:  # unexpected: report it, exit 1
            if os.environ.get("SYNTHGEN_DEBUG"):
                traceback.print_exc()
            where = f" ({exc.filename})" if isinstance(exc, OSError) and exc.filename else ""
            _fail(f"unexpected failure: {type(exc).__name__}: {exc}{where}", 1)

    return wrapper


def _progress(total: int, quiet: bool, label: str):
    """A rich progress bar on stderr, or a no-op; returns (context manager, advance(done)).

    The bar appears at the first ``advance``, once the work has started, so an
    error found before (a bad option, an output that may not be written) is
    printed alone.
    """
    from contextlib import contextmanager, nullcontext

    if quiet or total <= 1:
        return nullcontext(), None
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

    progress = Progress(
        TextColumn(label),
        BarColumn(),
        MofNCompleteColumn(),
        TimeRemainingColumn(),
        console=Console(stderr=True),
        transient=True,
    )
    task = progress.add_task(label, total=total)

    def advance(done: int) -> None:
        if not progress.live.is_started:
            progress.start()
        progress.update(task, completed=done)

    @contextmanager
    def shown():
        try:
            yield
        finally:
            if progress.live.is_started:
                progress.stop()

    return shown(), advance


ConfigArg = Annotated[
    Path | None,
    typer.Argument(help="TOML config; keys not given take built-in defaults (see configs/).", show_default=False),
]
SetOpt = Annotated[
    list[str] | None,
    typer.Option("--set", help="Override a config key with a TOML value, e.g. --set objects.count=[5,10]. Repeatable."),
]


# -- options shared by make and export (formats and splits) ------------------------
FormatsOpt = Annotated[
    str,
    typer.Option(
        "--formats", help="Comma-separated formats: coco, voc, yolo, tokens, masks (COCO JSON is always written by make)."
    ),
]
SplitOpt = Annotated[
    str | None,
    typer.Option("--split", help="Split the images, e.g. train=0.8,val=0.2 (one COCO file per split)."),
]


def _overrides(set_: list[str] | None, count: int | None, seed: int | None) -> list[str]:
    """--set values, then --count and --seed as the overrides they stand for."""
    overrides = list(set_ or [])
    if count is not None:
        overrides.append(f"count={count}")
    if seed is not None:
        overrides.append(f"seed={seed}")
    return overrides


def _formats_and_split(formats: str, split: str | None):
    from synthgen.formats import parse_formats, parse_split

    return parse_formats(formats), (parse_split(split) if split else None)



def _count(n: int, word: str) -> str:
    """``"1 image"``, ``"2 images"``."""
    return f"{n} {word}{'' if n == 1 else 's'}"


def _warn_drops(objects: int, dropped: dict, ignored: int, where: str = "") -> None:
    """One warning line on stderr when more than a tenth of the objects were not annotated."""
    from synthgen.run.make import drop_warning

    line = drop_warning(objects, dropped, ignored)
    if line is not None:
        typer.echo(f"synthgen: warning: {where}{line} (manifest: counts.dropped)", err=True)


# DetectorSpec field -> the jitter option that sets it (errors about a field name its option)

def _pair(text: str, option: str) -> tuple[float, float]:
    """Parse ``LO,HI`` (or one number V meaning ``V,V``)."""
    parts = [p.strip() for p in text.split(",")]
    try:
        values = [float(p) for p in parts]
    except ValueError:
        values = []
    if len(values) not in (1, 2):
        raise UserError(f"option '{option}' must be LO,HI or one number (got {text!r})")
    return (values[0], values[-1])



def _check_output_file(option: str, path: Path | None) -> None:
    """Refuse an output file path whose folder is missing or that names a folder, before any work."""
    if path is None:
        return
    if path.is_dir():
        raise UserError(f"option '{option}' must name a file, not a directory (got '{path}')")
    if path.parent.exists() and not path.parent.is_dir():
        raise UserError(f"option '{option}' names a file in '{path.parent}', which is a file (got '{path}')")
    if not path.parent.is_dir():
        raise UserError(f"option '{option}' names a file in a folder that does not exist (got '{path}')")



def _parse_ids(text: str) -> list[int]:
    """``"3,7,9"`` -> ``[3, 7, 9]``; a bad list is a user error naming the option."""
    try:
        ids = [int(part) for part in text.replace(" ", "").split(",") if part]
    except ValueError:
        ids = []
    if not ids:
        raise UserError(f"option '--ids' must be comma-separated image ids, e.g. 3,7,9 (got {text!r})")
    return ids


DatasetArg = Annotated[
    Path,
    typer.Argument(help="Dataset directory (with annotations.json) or a COCO JSON file.", show_default=False),
]


