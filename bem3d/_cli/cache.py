"""bem3d cache: list or clear the compressed backend's operator cache."""

import time
from pathlib import Path

from bem3d.base.errors import ModelError, option
from bem3d.base.resources import format_bytes
from bem3d.operators.cache import OperatorCache


def add_parser(subparsers):
    """Add the command to the CLI's subparsers; returns its parser."""
    p = subparsers.add_parser("cache", help="list or clear the operator cache")
    actions = p.add_subparsers(dest="action", required=True)
    listing = actions.add_parser("list", help="entries, sizes, last use and the total")
    clearing = actions.add_parser("clear", help="delete all entries, or the old ones")
    clearing.add_argument("--older-than", type=float, metavar="DAYS",
                          help="only entries last used more than DAYS days ago")
    for q in (listing, clearing):
        q.add_argument("--cache-dir", type=Path,
                       help="the cache folder (default $BEM3D_CACHE_DIR, else ~/.cache/bem3d)")
    return p


def run(args):
    store = OperatorCache(args.cache_dir)
    if args.action == "clear":
        if args.older_than is not None and not args.older_than >= 0:
            raise ModelError(f"{option('older_than')} must be 0 or more days, got "
                             f"{args.older_than:g}")
        removed = store.clear(args.older_than)
        print(f"removed {len(removed)} entries ({format_bytes(sum(e.size for e in removed))}) "
              f"from {store.folder}")
        return 0
    entries = store.entries()
    for e in entries:
        used = time.strftime("%Y-%m-%d %H:%M", time.localtime(e.last_used))
        print(f"{e.path.name:<70}{format_bytes(e.size):>11}  last used {used}")
    print(f"{len(entries)} entries, {format_bytes(sum(e.size for e in entries))} of the "
          f"{store.max_bytes / 1e9:g} GB cap, in {store.folder}")
    return 0
