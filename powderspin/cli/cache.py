"""``powderspin cache``: where the lineshape library is, what it holds, and clearing it."""

from __future__ import annotations

from .common import library

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    """Add the ``cache`` command to the subparsers ``sub``."""
    c = sub.add_parser("cache", help="the lineshape library: where it is, what it holds, clear it")
    c.add_argument("action", choices=("info", "path", "clear"),
                   help="info: entries and size; path: the folder; clear: remove every entry")
    c.add_argument("--cache", metavar="DIR", help="library folder (default $POWDERSPIN_CACHE or the user cache folder)")
    c.set_defaults(func=run)



def run(args) -> int:
    from ..disorder.library import cache_summary_text

    lib = library(args, must_write=args.action == "clear")
    if args.action == "path":
        print(lib.path)
    elif args.action == "info":
        print(cache_summary_text(lib))
        print("  on the command line: --cache DIR (simulate, fit, cache) or --no-cache (simulate, fit)")
    else:
        removed = lib.clear()
        print(f"removed {removed} entr{'y' if removed == 1 else 'ies'} from {lib.path}")
    return 0
