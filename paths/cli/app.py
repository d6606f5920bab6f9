"""The typer application and the error boundary of the command line.

Command modules in this package register their commands with :func:`command`;
they only parse options, call the library, print and write.  User errors
(:class:`~paths.InputError`) print one line and exit with status 2; any other
exception is an internal failure: one line with a hint to report it, exit
status 1.  ``paths --debug ...`` shows the traceback instead.
"""
from __future__ import annotations

import functools
import importlib
import pkgutil
import re

import typer
import typer.core
from rich.console import Console


__all__ = ["app", "command", "console", "err_console", "main", "load_commands", "as_flags", "flags_of",
           "emit_summary", "stdin_file", "is_quiet"]

#: modules of this package that are not commands
HELPERS = frozenset({"app", "checks", "flags", "progress"})

class OneLineErrors(typer.core.TyperGroup):
    """The command group: an option that does not parse prints one line (no box), exit 2."""

    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True,
             **extra):
        click = typer.core._click  # the click that typer vendors (its exceptions)

        if not standalone_mode:
            return super().main(args=args, prog_name=prog_name, complete_var=complete_var,
                                standalone_mode=False, **extra)
        try:
            rv = super().main(args=args, prog_name=prog_name, complete_var=complete_var,
                              standalone_mode=False, **extra)
        except click.exceptions.NoArgsIsHelpError as exc:
            typer.echo(exc.ctx.get_help() if exc.ctx is not None else str(exc))
            raise SystemExit(exc.exit_code) from None
        except click.exceptions.UsageError as exc:
            cmd = exc.ctx.command_path if exc.ctx is not None else "paths"
            text = " ".join(exc.format_message().split()).rstrip(".")
            typer.echo(f"error: {text}; see {cmd} --help", err=True)
            raise SystemExit(2) from None
        except click.exceptions.ClickException as exc:
            typer.echo(f"error: {' '.join(exc.format_message().split())}", err=True)
            raise SystemExit(exc.exit_code) from None
        except typer.Abort:
            typer.echo("aborted", err=True)
            raise SystemExit(1) from None
        raise SystemExit(rv if isinstance(rv, int) else 0)


app = typer.Typer(
    cls=OneLineErrors,
    name="paths",
    help=(
        "The whole ridge regularization path from one factorization. Penalty convention: "
        "minimize ||y - b0 - X beta||^2 + lambda ||beta||^2 on the centered "
        "(optionally standardized) design, intercept unpenalized."
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    # plain help: option names are never cut at 80 columns (long help text wraps instead)
    rich_markup_mode=None,
)
console = Console(highlight=False)
err_console = Console(stderr=True, highlight=False)
_state = {"debug": False}


def _version(value: bool) -> None:
    if value:
        from paths import __version__

        typer.echo(f"paths {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    debug: bool = typer.Option(False, "--debug", help="Show the traceback on errors."),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="Print nothing but errors."),
    json_out: bool = typer.Option(False, "--json", help="Print the run's summary as JSON on "
                                  "standard output (and nothing else there)."),
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True,
                                 help="Print the version and exit."),
):
    _state["debug"] = debug
    _state["json"] = json_out
    _state["quiet"] = quiet
    console.quiet = quiet or json_out


def is_quiet() -> bool:
    """Whether ``paths --quiet`` was given (errors only: no summary, no progress)."""
    return bool(_state.get("quiet"))


def stdin_file(data):
    """``-`` as the data argument: standard input, kept in a temporary CSV file for the run
    (removed at exit; named "standard input" in every output, :mod:`paths.data.stdin`);
    any other path is returned unchanged."""
    if str(data) != "-":
        return data
    from paths.data.stdin import copy_stdin

    return copy_stdin()


def _named_inputs(message: str) -> str:
    """An error message with any temporary copy of standard input named "standard input"."""
    import sys

    stdin = sys.modules.get("paths.data.stdin")  # loaded only when '-' was given
    if stdin is None:
        return message
    for path in stdin.stdin_copies():
        message = message.replace(path, stdin.STDIN_SOURCE)
    return message


def emit_summary(summary: dict) -> None:
    """With ``paths --json``, write the run's summary record to standard output as JSON."""
    if _state.get("json"):
        import json
        import sys

        json.dump(summary, sys.stdout, allow_nan=False, default=str)
        sys.stdout.write("\n")


def _with_warning_notes(func, args, kwargs):
    """Run a command; numpy's RuntimeWarnings (overflow, invalid value near the limits of
    floating point) become one ``note:`` line each on success, not warning blocks."""
    import warnings

    seen = []
    show = warnings.showwarning

    def collect(message, category, filename, lineno, file=None, line=None):
        if issubclass(category, RuntimeWarning):
            seen.append(" ".join(str(message).split()))
        else:
            show(message, category, filename, lineno, file, line)

    with warnings.catch_warnings():
        warnings.showwarning = collect
        result = func(*args, **kwargs)
    for text in dict.fromkeys(seen):
        err_console.print(f"note: numerical warning: {text} (values near the limits of floating "
                          "point; check the scale of the data)", soft_wrap=True, markup=False)
    return result


def command(*args, **kwargs):
    """``app.command`` with the error boundary: exit 2 for user errors, 1 for bugs."""

    def register(func):
        flags = flags_of(func)

        @functools.wraps(func)
        def wrapper(*a, **kw):
            try:
                from paths.cli.checks import check_options  # loads numpy: not for --help

                check_options(kw)
                return _with_warning_notes(func, a, kw)
            except (typer.Exit, typer.Abort):
                raise
            except KeyboardInterrupt:
                err_console.print("interrupted; no partial file was left under a final name")
                raise typer.Exit(130) from None
            except Exception as exc:
                # imported here: the data layer loads numpy, which `paths --help` does not need
                from paths.data.validation import InputError

                if _state["debug"]:
                    raise
                if isinstance(exc, InputError):
                    err_console.print(f"error: {as_flags(_named_inputs(str(exc)), flags)}", soft_wrap=True,
                                      markup=False)
                    raise typer.Exit(2) from None
                err_console.print(
                    f"internal error: {type(exc).__name__}: {exc} -- this is a bug in paths; "
                    "please report it with the command line (add --debug for the traceback)",
                    soft_wrap=True, markup=False,
                )
                raise typer.Exit(1) from None

        return app.command(*args, **kwargs)(wrapper)

    return register


#: library parameter -> the command parameter that sets it, where the two names differ
#: (``cross_validate(scaling=)`` is ``paths explore --cv-scaling``)
LIBRARY_NAMES = {"scaling": "cv_scaling"}


def flags_of(func) -> dict:
    """``{parameter name: its long flag}`` of a command function's typer options, and the
    library's name of a parameter where it differs (:data:`LIBRARY_NAMES`)."""
    import inspect

    out = {}
    for name, param in inspect.signature(func).parameters.items():
        decls = getattr(param.default, "param_decls", None) or ()
        longs = [d.split("/")[0] for d in decls if d.startswith("--")]
        if longs:
            out[name] = longs[0]
    out.update({lib: out[own] for lib, own in LIBRARY_NAMES.items() if own in out})
    return out


# a parameter name is turned into its flag when it cannot be prose: it has an underscore,
# it starts the message, or it follows "either", "or", "and", "with", "needs", "use"
_CONTEXT = (r"(?:^|(?<=\beither )|(?<=\bor )|(?<=\band )|(?<=\bwith )|(?<=\bneeds )"
            r"|(?<=\buse ))")


def as_flags(message: str, flags: dict) -> str:
    """A library error message with the parameters it names spelled as this command's flags.

    Library errors name parameters (``n_folds``, ``holdout``); on the command
    line the user knows the flags (``--n-folds``, ``--holdout``).  A parameter
    written as Python passes it, ``name=value`` (``encode='onehot'``,
    ``target=COLUMN``, ``sep=``), becomes ``--flag value`` (``--encode onehot``;
    ``name=True``: the flag alone).

    Examples
    --------
    >>> as_flags("pass encode='onehot', or exclude= them", {"encode": "--encode",
    ...                                                     "exclude": "--exclude"})
    'pass --encode onehot, or --exclude them'
    """
    for name in sorted(flags, key=len, reverse=True):
        flag = flags[name]
        message = re.sub(r"(?<![\w-])" + re.escape(name)
                         + r"""=(?:'([^']*)'|"([^"]*)"|([^\s,;)'"]*))""",
                         lambda m: " ".join(x for x in (flag, *m.groups())
                                            if x and x != "True"), message)
        where = r"(?<![\w-])" if "_" in name else _CONTEXT
        message = re.sub(where + re.escape(name) + r"(?![\w=-])", flag, message)
    return message


def load_commands() -> None:
    """Import every command module of this package (each registers itself)."""
    from paths.cli import __path__ as here

    for mod in pkgutil.iter_modules(here):
        if mod.name not in HELPERS and not mod.name.startswith("_"):
            importlib.import_module(f"{__package__}.{mod.name}")


def main() -> None:
    """Console entry point."""
    load_commands()
    app()
