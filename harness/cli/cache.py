"""``foldbench cache``: show or empty the embedding cache."""

from __future__ import annotations

import argparse
from pathlib import Path

from ._base import EXIT_OK, Command


def _arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("action", choices=["info", "clear"])
    p.add_argument("--cache", metavar="DIR", help="cache folder (default: the user cache folder)")


def _handler(args: argparse.Namespace) -> int:
    from ..run import EmbeddingCache, default_cache_dir

    cache = EmbeddingCache(Path(args.cache) if args.cache else default_cache_dir())
    if args.action == "clear":
        print(f"removed {cache.clear()} cached embeddings from {cache.root}")
    else:
        info = cache.info()
        print(f"{info['path']}: {info['entries']} cached embeddings, {info['bytes'] / 2**20:.1f} MiB")
    return EXIT_OK


COMMANDS = [Command("cache", "show or empty the embedding cache", _arguments, _handler)]
