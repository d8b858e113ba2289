"""The starter design file that ``chipflow new`` writes."""

from __future__ import annotations

import re
from importlib import resources
from pathlib import Path

from chipflow.errors import SpecError
from chipflow.export._files import atomic_write
from chipflow.spec.reader import MAX_NAME_LENGTH

__all__ = ["starter_text", "write_starter"]

_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")


def starter_text(name: str) -> str:
    """The commented starter design, named ``name``.

    >>> 'name = "liver-bed"' in starter_text("liver-bed")
    True
    """
    if len(name) > MAX_NAME_LENGTH:
        raise SpecError(
            f"design name {name[:40]!r}...: {len(name)} characters is too long "
            f"(at most {MAX_NAME_LENGTH})"
        )
    if not _NAME.match(name):
        raise SpecError(
            f"design name {name!r}: use letters, digits, '-', '_' or '.', starting with a "
            "letter or digit (e.g. liver-bed)"
        )
    template = resources.files("chipflow.data").joinpath("starter.toml").read_text("utf-8")
    return template.replace("__NAME__", name)


def write_starter(name: str, folder: str | Path = ".") -> Path:
    """Write ``<name>.toml`` into ``folder`` (never over an existing file); return its path."""
    stem = name[:-5] if name.endswith(".toml") else name
    text = starter_text(stem)
    path = Path(folder) / f"{stem}.toml"
    if path.exists():
        raise SpecError(f"{path}: already exists; choose another name or remove it first")
    return atomic_write(path, lambda tmp: tmp.write_bytes(text.encode("utf-8")), "design file")
