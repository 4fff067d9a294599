"""``filamant init [DIR]``: write a commented starter design and study to edit.

Writes ``design.toml`` (one design, for ``filamant evaluate``) and ``study.toml`` (a sweep study,
for ``filamant run``) into ``DIR``, both copies of the commented examples of
``studies/examples`` with the study renamed after the file. Existing files are never
overwritten unless ``--force`` is given.
"""

from __future__ import annotations

import argparse
import re
from pathlib import Path

from sweeps.errors import ConfigError

__all__ = ["EXAMPLE", "add_arguments", "run", "write_starter"]

EXAMPLE = "filamant init my_tag && filamant evaluate my_tag/design.toml"

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
TEMPLATES = {"design.toml": "drawer_tag.toml", "study.toml": "drawer_study.toml"}


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``filamant init``."""
    parser.add_argument("directory", nargs="?", default=".", metavar="DIR",
                        help="folder to write design.toml and study.toml into (default: here)")
    parser.add_argument("--force", action="store_true",
                        help="overwrite design.toml / study.toml if they exist")


def write_starter(directory: Path, force: bool = False) -> list[Path]:
    """Write the starter files into ``directory``; returns their paths.

    Raises
    ------
    ConfigError
        If a file exists and ``force`` is false (nothing is written then).
    """
    if directory.exists() and not directory.is_dir():
        raise ConfigError(f"{directory}: exists and is not a folder; give a folder for init")
    try:
        directory.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ConfigError(f"{directory}: cannot create the folder ({exc.strerror})") from None
    targets = [directory / name for name in TEMPLATES]
    existing = [p for p in targets if p.exists()]
    if existing and not force:
        raise ConfigError(f"{existing[0]}: already exists; use --force to overwrite it")
    for target in targets:
        text = (EXAMPLES / TEMPLATES[target.name]).read_text(encoding="utf-8")
        if target.name == "study.toml":
            text = re.sub(r'^name = "[^"]*"', 'name = "study"', text, count=1, flags=re.M)
        target.write_text(text, encoding="utf-8")
    return targets


def run(args: argparse.Namespace) -> int:
    for path in write_starter(Path(args.directory), force=args.force):
        print(f"wrote {path}")
    print("next: filamant evaluate design.toml  |  filamant run study.toml")
    return 0
