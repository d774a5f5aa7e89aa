"""``earfold cache``: show and clear the cache of prepared filters."""

from __future__ import annotations

import argparse

from .cli_output import EXIT_BAD_INPUT, print_json

__all__ = ["add_cache_parser"]


def _cache() -> object:
    from earfold.renderer.render import FilterCache, cache_directory, cache_limit_bytes

    return FilterCache(cache_directory(), limit_bytes=cache_limit_bytes())


def cmd_cache_info(args: argparse.Namespace) -> int:
    from earfold.renderer.render import FilterCache

    cache = _cache()
    assert isinstance(cache, FilterCache)
    info = cache.info()
    if args.json:
        print_json(info)
        return 0
    print(f"folder   {info['directory']}")
    print(f"entries  {info['entries']}")
    size, limit = info["bytes"] / 2**20, info["limit_bytes"] / 2**20
    print(f"size     {size:.1f} MiB of at most {limit:.0f} MiB")
    for kind, held in info["kinds"].items():
        print(
            f"  {kind:<12} {held['entries']:>4} entr{'y' if held['entries'] == 1 else 'ies'}"
            f"  {held['bytes'] / 2**20:8.1f} MiB"
        )
    return 0


def cmd_cache_clear(args: argparse.Namespace) -> int:
    from earfold.renderer.render import FilterCache

    cache = _cache()
    assert isinstance(cache, FilterCache)
    removed = cache.clear()
    print(f"removed {removed} entr{'y' if removed == 1 else 'ies'} from {cache.directory}")
    return 0


def add_cache_parser(sub: argparse._SubParsersAction) -> None:
    """Add ``cache info`` and ``cache clear`` to the ``earfold`` subcommands."""
    p = sub.add_parser(
        "cache",
        help="show or clear the cache of prepared filters",
        description="Renders keep the HRTF sets and rooms they prepare (resampled, "
        "equalised, room filters, filter banks, an ADM render's moving pair grid) in a "
        "folder, so that the next render with the same set "
        "and room starts sooner: $EARFOLD_CACHE_DIR, else the user's cache folder. Its size "
        "is bounded ($EARFOLD_CACHE_LIMIT_MB, default 1024), the least recently used "
        "entries going first. $EARFOLD_NO_CACHE=1 or 'render --no-cache' bypasses it.",
    )
    csub = p.add_subparsers(dest="cache_command", metavar="ACTION", help="what to do")
    q = csub.add_parser("info", help="the cache's folder, entries and size")
    q.add_argument("--json", action="store_true", help="print JSON instead of text")
    q.set_defaults(func=cmd_cache_info)
    q = csub.add_parser("clear", help="remove every entry")
    q.set_defaults(func=cmd_cache_clear)

    def missing(args: argparse.Namespace, parser: argparse.ArgumentParser = p) -> int:
        parser.print_help()
        return EXIT_BAD_INPUT

    p.set_defaults(func=missing)
