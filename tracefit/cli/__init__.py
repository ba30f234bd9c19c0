"""Command line: a thin typer layer over the library.

Each command lives in its own module under ``tracefit.cli`` and registers itself on
:data:`app`. Bad input raises :class:`tracefit.errors.TracefitInputError`, which
:func:`main` prints as one line on stderr with exit code 2, never a traceback.
"""

from __future__ import annotations

import sys

import typer

app = typer.Typer(
    name="tracefit",
    help="Identify the slip or twin system behind straight bands in micrographs.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    # plain help: no '<bool>' beside flags, no boxes; reads the same in a terminal, a pipe or a log
    rich_markup_mode=None,
)


def _print_version(value: bool) -> None:
    if value:
        from tracefit import __version__

        typer.echo(f"tracefit {__version__}")
        raise typer.Exit(0)


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", help="Print the version and exit.", callback=_print_version,
                                 is_eager=True),
    hex_indices: str = typer.Option("four", "--hex-indices", metavar="four|three",
                                    help="Print hexagonal planes and directions with four (Miller-Bravais, default) or "
                                         "three (Miller, on the a1 a2 c cell) indices, in every table, CSV and report. "
                                         "Give it before the command: tracefit --hex-indices three identify ..."),
) -> None:
    """tracefit: slip- and twin-trace analysis of micrographs."""
    from tracefit.crystal.indices import _HEX_NOTATION, HEX_NOTATIONS
    from tracefit.errors import TracefitInputError

    if hex_indices not in HEX_NOTATIONS:
        raise TracefitInputError(f"--hex-indices must be four or three, got {hex_indices!r}")
    # main() runs each command in a copied context, so this lasts for the one command
    _HEX_NOTATION.set(hex_indices)


def _register(argv: list[str] | None = None) -> None:
    # Importing a command module registers its command(s) on ``app``. A command line that names a
    # known command needs only that command's module (a shorter start-up: typer builds and checks
    # every registered command before running one); anything else (help, a typo) registers them all.
    from importlib import import_module

    module = _COMMAND_MODULE_OF.get(_command_word(sys.argv[1:] if argv is None else argv) or "")
    for name in [module] if module else _COMMAND_MODULES:
        try:
            import_module(f"tracefit.cli.{name}")
        except ModuleNotFoundError as exc:
            # A planned command whose module is not written yet; any other missing
            # module is a real error and propagates.
            if exc.name != f"tracefit.cli.{name}":
                raise


# One entry per command module, in the order of ``tracefit --help``.
_COMMAND_MODULES: list[str] = ["demo", "survey", "stats", "identify", "detect", "predict", "systems", "align", "orient", "twoface", "maps"]
# The module of each command (a command not listed here registers every module).
_COMMAND_MODULE_OF: dict[str, str] = {
    "demo": "demo", "survey": "survey", "stats": "stats", "identify": "identify", "detect": "detect",
    "predict": "predict", "systems": "systems", "align-frame": "align", "find-orientation": "orient",
    "two-face": "twoface", "map-grains": "maps",
}


def _command_word(argv: list[str]) -> str | None:
    """The command named on a command line: the first word that is not a root option or its value."""
    skip = False
    for word in argv:
        if skip:
            skip = False
        elif word == "--hex-indices":
            skip = True
        elif not word.startswith("-"):
            return word
    return None


def _in_flag_terms(exc) -> str:
    """A library message about a setting, with the setting's name replaced by its command-line flag."""
    from tracefit.options import OptionError, option

    msg = str(exc)
    if isinstance(exc, OptionError):
        try:
            flag = option(exc.name).flag
        except KeyError:
            flag = None
        if flag:
            msg = msg.replace(exc.name, flag, 1)
    return msg


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``tracefit`` console script."""
    from tracefit.errors import TracefitInputError

    import contextvars

    _register(argv)
    try:
        # a fresh copy of the context: display settings made by one call never leak into the next
        code = contextvars.copy_context().run(app, args=argv, standalone_mode=False)
    except TracefitInputError as exc:
        print(f"tracefit: error: {_in_flag_terms(exc)}", file=sys.stderr)
        return 2
    except typer.Exit as exc:  # raised by commands for a chosen exit code
        return int(exc.exit_code or 0)
    except typer.Abort:
        print("tracefit: aborted", file=sys.stderr)
        return 1
    except Exception as exc:
        # Usage errors from the click layer (typer may vendor its own copy of click,
        # so match by class name rather than by importing click).
        if any(k.__name__ == "ClickException" for k in type(exc).__mro__):
            # One line like every other error (click's own usage block is several).
            msg = " ".join(str(exc.format_message()).split())
            print(f"tracefit: error: {msg} (see tracefit --help)", file=sys.stderr)
            return int(getattr(exc, "exit_code", 2) or 2)
        raise
    return int(code) if isinstance(code, int) else 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
