"""Command line: ``python -m saxsnb <command> ...`` (also installed as ``saxsnb``).

Commands live in :data:`COMMANDS` (name -> (add_arguments, run)), so a new one is a
pair of small functions and one dictionary entry.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Sequence

__all__ = ["main", "COMMANDS"]


def _demo_arguments(parser: argparse.ArgumentParser) -> None:
    from .demo import SCENARIOS

    parser.add_argument("--out", required=True, metavar="DIR",
                        help="folder to write into (created if missing); one sub-folder per scenario")
    names = (*SCENARIOS, "preparation", "images")
    parser.add_argument("--names", nargs="+", choices=names, default=None, metavar="NAME",
                        help=f"scenarios to write (default: all of {', '.join(names)})")
    parser.add_argument("--seed", type=int, default=0, help="random seed of the noise (default 0)")


def _demo_run(args: argparse.Namespace) -> int:
    from .demo import write_demo

    folders = write_demo(args.out, names=args.names, seed=args.seed)
    for name, folder in folders.items():
        n = len(list(folder.glob("*.dat")))
        n_img = len(list(folder.glob("*.tif")))
        parts = [f"{n} curves"] if n else []
        parts += [f"{n_img} image{'s' if n_img > 1 else ''}"] if n_img else []
        subs = [sub for sub in sorted(folder.iterdir()) if sub.is_dir()]
        for sub in subs:
            k = len(list(sub.glob("*.dat"))) or len(list(sub.glob("*.tif")))
            parts.append(f"{sub.name} ({k})")
        print(f"{name}: {' + '.join(parts)} in {folder}")
    print("synthetic data from closed-form models; see README.md in each folder")
    return 0


#: name -> (help text, add_arguments(parser), run(args) -> exit code)
COMMANDS: dict[str, tuple[str, Callable[[argparse.ArgumentParser], None],
                          Callable[[argparse.Namespace], int]]] = {
    "demo": ("write the synthetic demo series as folders of text files (and detector images as TIFF)",
             _demo_arguments, _demo_run),
}


def build_parser() -> argparse.ArgumentParser:
    from . import __version__

    parser = argparse.ArgumentParser(
        prog="saxsnb", description="saxsnb: series-native SAXS analysis for Jupyter."
    )
    parser.add_argument("--version", action="version", version=f"saxsnb {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, (help_text, add_arguments, _) in COMMANDS.items():
        add_arguments(sub.add_parser(name, help=help_text, description=help_text))
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit code (0 ok, 1 saxsnb error, 2 usage)."""
    from .errors import SaxsError

    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help(sys.stderr)
        return 2
    try:
        return COMMANDS[args.command][2](args)
    except SaxsError as exc:
        print(f"saxsnb {args.command}: error: {exc}", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
