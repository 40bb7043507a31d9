"""The ``ped2g`` command: one subcommand per stage.

Each stage lives in its own module ``ped2g.<stage>.command`` (or ``ped2g.<name>_command``) that
defines ``HELP`` (one line), ``DESCRIPTION`` (a paragraph), ``add_arguments(parser)`` and
``run(args)``. Heavy imports (PyMC, matplotlib) stay inside ``run`` so ``--help`` is instant.
"""

from __future__ import annotations

import argparse
import faulthandler
import importlib
import sys
import time
from collections.abc import Sequence

from . import __version__
from .errors import ChecksFailed, UserError

# (subcommand, module) in the order a study runs them.
COMMANDS: list[tuple[str, str]] = [
    ("init", "ped2g.init_command"),
    ("simulate", "ped2g.simulate.command"),
    ("pedigree", "ped2g.pedigree.command"),
    ("fit", "ped2g.fit.command"),
    ("null", "ped2g.null.command"),
    ("null-refit", "ped2g.null.refit_command"),
    ("compare", "ped2g.compare.command"),
    ("report", "ped2g.report.command"),
]

DESCRIPTION = """\
ped2g takes a study's raw pedigree and phenotype tables to posterior comparisons of the additive
genetic (co)variance matrices (G) of several populations. Each stage below runs on its own from
explicit paths; the Snakemake workflow (Snakefile) runs them all from one config file.
Run 'ped2g STAGE --help' for the options of a stage."""


class _Formatter(argparse.RawDescriptionHelpFormatter):
    """Keeps descriptions as written and adds "(default: X)" only where a default means something."""

    def _get_help_string(self, action: argparse.Action) -> str:
        text = action.help or ""
        default = action.default
        if ("default" in text or default in (None, False, argparse.SUPPRESS)
                or action.option_strings == [] or isinstance(action, argparse._HelpAction)):
            return text
        return f"{text} (default: %(default)s)"


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="ped2g", description=DESCRIPTION,
                                     formatter_class=_Formatter)
    parser.add_argument("--version", action="version", version=f"ped2g {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="STAGE", title="stages")
    for name, module_name in COMMANDS:
        module = importlib.import_module(module_name)
        p = sub.add_parser(name, help=module.HELP, description=module.DESCRIPTION,
                           formatter_class=_Formatter)
        module.add_arguments(p)
        p.set_defaults(_run=module.run, _name=name)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help()
        return 0
    if not faulthandler.is_enabled():
        # a crash in native code (a segmentation fault in a compiled library) then leaves the
        # Python stack of every thread in the stage's log instead of an empty log
        faulthandler.enable(file=sys.__stderr__, all_threads=True)
    start = time.perf_counter()
    try:
        status = args._run(args)
    except UserError as err:
        print(f"ped2g {args._name}: error: {err}", file=sys.stderr)
        return err.exit_status
    except ChecksFailed as err:
        print(f"ped2g {args._name}: checks failed: {err}", file=sys.stderr)
        return err.exit_status
    except KeyboardInterrupt:
        print(f"ped2g {args._name}: interrupted", file=sys.stderr)
        return 130
    from .io import get_logger

    get_logger(args._name).info("finished in %.1f s", time.perf_counter() - start)
    return int(status or 0)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
