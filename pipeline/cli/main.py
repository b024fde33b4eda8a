"""The ``vzero`` command line: ``main(argv) -> int``.

Exit codes: 0 success; 1 the run finished but some wells or plates failed; 2 bad recipe, input or usage;
3 internal error (a bug: ``--debug`` shows the traceback); 130 interrupted.
Errors print as one message ending with what to do; ``--debug`` shows the traceback.
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from vzero.cli.say import Progress, report_result, say
from vzero.errors import VzeroError
from vzero.meta import __version__

EPILOG = """exit codes: 0 success; 1 finished with failed wells or plates; 2 bad recipe or input;
3 internal error (--debug shows the traceback). Set NO_COLOR to turn colour off.
Results are for research use; they do not replace your lab's validated procedures."""


@dataclass
class Command:
    name: str
    help: str
    configure: Callable[[argparse.ArgumentParser], None]
    run: Callable[[argparse.Namespace], int]
    example: str = ""


class Commands:
    """Collects subcommands from the core and from vzero.plugins (hook ``vzero_commands``)."""

    def __init__(self) -> None:
        self.items: dict[str, Command] = {}

    def add(
        self,
        name: str,
        help: str,
        configure: Callable[[argparse.ArgumentParser], None],
        run: Callable[[argparse.Namespace], int],
        example: str = "",
    ) -> None:
        if name in self.items:
            raise VzeroError(f"command {name!r} is defined twice (by the core or a plugin); rename one")
        self.items[name] = Command(name, help, configure, run, example)


# -- core commands ---------------------------------------------------------------------------------------


def _cfg_run(p: argparse.ArgumentParser) -> None:
    p.add_argument("recipe", help="the recipe file (YAML)")
    p.add_argument("--out", "-o", help="folder to write run.h5 and the tables into (default: a folder named "
                                       "after the recipe, next to it: demo.yaml -> demo/)")
    p.add_argument("--force", action="store_true", help="replace an existing run in --out")
    p.add_argument("--jobs", "-j", type=_positive, default=1, metavar="N",
                   help="run plates in N local processes (default 1); with --scheduler local: N workers")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="run plates on the Dask cluster at ADDRESS (tcp://host:8786), or 'local' to start one "
                        "on this machine (needs: pip install 'vzero[dask]')")
    p.add_argument("--max-input", type=_size, default=None, metavar="SIZE",
                   help="read at most SIZE of input files (bytes, or with K, M, G: 8G); default 2G")


def _size(text: str) -> int:
    """``"8G"`` -> 8 * 1024**3 bytes (K, M, G, T; plain digits are bytes)."""
    factors = {"K": 1024, "M": 1024**2, "G": 1024**3, "T": 1024**4}
    body, unit = (text[:-1], text[-1].upper()) if text[-1:].upper() in factors else (text, "")
    try:
        value = float(body)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a size like 500M or 8G, got {text!r}") from None
    if not value > 0 or value == float("inf"):
        raise argparse.ArgumentTypeError(f"expected a positive size, got {text!r}")
    return int(value * factors.get(unit, 1))


def default_out(recipe: str) -> Any:
    """The output folder when ``--out`` is not given: the recipe's name without its suffix, next to it
    (``plates/assay.yaml`` -> ``plates/assay/``). An existing run there is replaced only with ``--force``."""
    path = Path(recipe)
    return path.with_suffix("") if path.suffix else path.with_name(path.name + "-run")


def _positive(text: str) -> int:
    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number of processes, got {text!r}") from None
    if n < 1:
        raise argparse.ArgumentTypeError(f"expected 1 or more processes, got {n}")
    return n


def _cmd_run(args: argparse.Namespace) -> int:
    from vzero.run.runner import run

    shown = Progress(verbose=args.verbose, quiet=args.quiet)
    if args.out is None:
        args.out = str(default_out(args.recipe))
    try:
        limit = {"max_input_bytes": args.max_input} if args.max_input else {}
        result = run(args.recipe, args.out, force=args.force, progress=shown, jobs=args.jobs,
                     scheduler=args.scheduler, **limit)
    finally:
        shown.finish()
    report_result(args, result)
    return result.exit_code


def _cfg_check(p: argparse.ArgumentParser) -> None:
    p.add_argument("recipe", help="the recipe file (YAML)")
    p.add_argument("--load-plugins", action="store_true",
                   help="also import the plugins the recipe names and check their steps (runs their code)")


def _cmd_check(args: argparse.Namespace) -> int:
    from vzero.errors import sentence
    from vzero.run.runner import check_inputs

    found = check_inputs(args.recipe, load_plugins=args.load_plugins)
    rec = found.recipe
    for note in found.warnings:
        print(f"warning: {sentence(note)}", file=sys.stderr)
    for note in found.skipped:
        say(args, f"not checked: {sentence(note)}")
    say(args, f"{args.recipe}: OK ({len(rec.plates)} plate(s) read and checked, {len(rec.steps)} steps: "
               + ", ".join(f"{s.kind}:{s.method}" for s in rec.steps) + ").")
    if rec.plugin_entries and not args.load_plugins:
        say(args, f"The recipe's plugins ({', '.join(rec.plugin_entries)}) were not imported. Pass --load-plugins "
                  "to check their steps too (that runs their code).")
    return 0


def _cfg_plugins(p: argparse.ArgumentParser) -> None:
    p.add_argument("--recipe", help="also load the local plugins this recipe names")
    p.add_argument("--params", action="store_true", help="list each method's parameters")


def _cmd_plugins(args: argparse.Namespace) -> int:
    from vzero.manager import make_manager

    local: list[str] = []
    base = None
    if args.recipe:
        from vzero.recipe import load

        rec = load(args.recipe)
        local, base = rec.plugin_entries, rec.base_dir
    plugins = make_manager(local, base_dir=base)
    rows = [(e.kind, e.name, e.source.distribution, str(getattr(e.component, "version", e.source.version)),
             e.source.path or e.source.module) for e in plugins.registry]
    widths = [max(len(r[i]) for r in [("kind", "method", "from", "version", "module"), *rows]) for i in range(5)]
    fmt = "  ".join(f"{{:{w}}}" for w in widths)
    print(fmt.format("kind", "method", "from", "version", "module"))
    for row, entry in zip(rows, plugins.registry, strict=True):
        print(fmt.format(*row))
        if args.params:
            params = getattr(entry.component, "params", {})
            if not isinstance(params, Mapping):  # a fit model's params are its parameter names, not settings
                print(f"      parameters: {', '.join(str(getattr(p, 'name', p)) for p in params)}")
                continue
            for key, param in params.items():
                default = "" if param.required else f" (default {param.default!r})"
                print(f"      {key}: {param.describe()}{default}. {param.doc}")
    return 0


def _cfg_inspect(p: argparse.ArgumentParser) -> None:
    p.add_argument("audit", help="an audit file (run.h5)")
    p.add_argument("--no-verify", action="store_true",
                   help="read the audit file without checking its digests first (the output says so)")


def _cmd_inspect(args: argparse.Namespace) -> int:
    from vzero.audit.verify import check_intact
    from vzero.cli.inspect import summary

    check_intact(args.audit, check=not args.no_verify, say=print)
    print(summary(args.audit))
    return 0


CORE: list[tuple[str, str, Callable[[argparse.ArgumentParser], None], Callable[[argparse.Namespace], int], str]] = [
    ("run", "Run a recipe on its plates and write the audit file and tables.", _cfg_run, _cmd_run,
     "vzero run configs/demo.yaml --out runs/today\n  vzero run batch.yaml --out runs/batch --jobs 4"),
    ("check", "Validate a recipe, its data and layout files without running it.", _cfg_check, _cmd_check,
     "vzero check configs/demo.yaml"),
    ("plugins", "List every stage method and model, where it came from and its version.", _cfg_plugins,
     _cmd_plugins, "vzero plugins --params"),
    ("inspect", "Summarise an audit file: provenance, steps, warnings, flagged wells.", _cfg_inspect,
     _cmd_inspect, "vzero inspect runs/today/run.h5"),
]


#: Core commands that live in their own modules. Each module defines HELP, EXAMPLE, configure(parser) and
#: run(args) -> int, and keeps its top-level imports light.
COMMAND_MODULES: tuple[tuple[str, str], ...] = (
    ("rerun", "vzero.cli.rerun"),
    ("diff", "vzero.cli.diff"),
    ("verify", "vzero.cli.verify"),
)


def _module_command(name: str, module_name: str) -> tuple[str, str, Any, Any, str]:
    import importlib

    module = importlib.import_module(module_name)
    return name, module.HELP, module.configure, module.run, module.EXAMPLE


def build_parser(with_plugins: bool = True) -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="vzero",
        description="Initial rates and kinetic parameters from plate-reader time courses.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"vzero {__version__}")
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("-q", "--quiet", action="store_true", help="print only errors")
    common.add_argument("-v", "--verbose", action="store_true", help="print more detail")
    common.add_argument("--debug", action="store_true", help="show tracebacks")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    commands = Commands()
    for name, help_, configure, run_, example in CORE + [_module_command(n, m) for n, m in COMMAND_MODULES]:
        commands.add(name, help_, configure, run_, example)
    if with_plugins:
        from vzero.manager import make_manager

        make_manager().hook.vzero_commands(commands=commands)
    for cmd in commands.items.values():
        epilog = f"example:\n  {cmd.example}\n\n{EPILOG}" if cmd.example else EPILOG
        p = sub.add_parser(cmd.name, help=cmd.help, description=cmd.help, parents=[common], epilog=epilog,
                           formatter_class=argparse.RawDescriptionHelpFormatter)
        cmd.configure(p)
        p.set_defaults(_run=cmd.run)
    return parser


def _quietly(args: argparse.Namespace) -> int:
    """Run the command with Python's own warnings (numpy, pandas, ...) kept off the terminal: what a user
    must know is said by vzero itself, in the run's warnings. ``--verbose`` or ``--debug`` shows them."""
    import warnings

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("default")
        code = int(args._run(args))
    if caught and (getattr(args, "verbose", False) or getattr(args, "debug", False)):
        for w in caught:
            print(f"python warning: {w.category.__name__}: {w.message} ({Path(w.filename).name}:{w.lineno})",
                  file=sys.stderr)
    return code


def main(argv: Sequence[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    debug = "--debug" in argv
    args = None
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        if not getattr(args, "_run", None):
            parser.print_help()
            return 2
        return _quietly(args)
    except VzeroError as exc:
        if debug:
            raise
        print(f"error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("interrupted; nothing was written to the output folder", file=sys.stderr)
        return 130
    except BrokenPipeError:
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except OSError as exc:  # the disk or the file system, not vzero: a full disk, a read-only folder, a file in the way
        if debug:
            raise
        from vzero.errors import OutputWriteError

        error = OutputWriteError.from_os(exc, action="use")
        print(f"error: {error}", file=sys.stderr)
        return error.exit_code
    except Exception as exc:  # a bug, not bad input: one line unless --debug
        if debug:
            raise
        nothing = "; nothing was written to the output folder" if getattr(args, "out", None) else ""
        print(f"error: internal error ({type(exc).__name__}: {exc}){nothing}. "
              "Run again with --debug for the traceback and report it.", file=sys.stderr)
        return 3


def entry() -> None:
    """The ``vzero`` command: :func:`main`, then a quick exit.

    Left to itself, the interpreter would free one by one every object that pandas, pint, scipy and
    matplotlib made before it exits: a tenth of a short run, spent after the work is done. By the
    time :func:`main` returns, every file vzero wrote is closed and on disk, so the exit handlers are run,
    standard output and error flushed, and the process leaves at once with main's exit code (120 if standard
    output could not be written, as Python itself reports). Where a thread is still running, the ordinary
    exit is kept. (Tests call :func:`main` itself, in-process.)"""
    import atexit
    import threading

    code = main()
    if threading.active_count() > 1:  # a plugin left a thread running: let Python end it the usual way
        sys.exit(code)
    # what a normal exit would run (temporary folders, pools, clusters): CPython's private hook, the one way to
    # run the exit handlers before os._exit; tests/pipeline/test_cli_exit.py pins that they run
    atexit._run_exitfuncs()
    try:
        sys.stdout.flush()
    except (OSError, ValueError):  # output lost (a full disk, a closed pipe): say so in the exit code, as Python
        code = code or 120
    try:
        sys.stderr.flush()
    except (OSError, ValueError):
        pass
    os._exit(code)


if __name__ == "__main__":  # pragma: no cover
    entry()
