"""The design files installed with chipflow (``chipflow/designs/``, the repository's designs/).

``chipflow designs`` lists them, ``chipflow new NAME --from DESIGN`` copies one to edit, and
every command that takes a design file also accepts a bundled design's name when no file of
that name exists, so the examples in ``--help`` work after a plain ``pip install``.

Examples
--------
>>> "bench_loop_network" in [d.name for d in bundled_designs()]
True
>>> resolve_design("tree_vessel").name
'tree_vessel.toml'
"""

from __future__ import annotations

import re
import tomllib
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

from chipflow.errors import SpecError
from chipflow.export._files import atomic_write

__all__ = ["BundledDesign", "bundled_designs", "resolve_design", "copy_bundled"]


@dataclass(frozen=True)
class BundledDesign:
    """One installed design file.

    Attributes
    ----------
    name : str
        File stem, e.g. ``"tree_vessel"``.
    path : pathlib.Path
        The installed file.
    summary : str
        The first sentence of its ``description``.
    """

    name: str
    path: Path
    summary: str


def _folder() -> Path:
    return Path(str(resources.files("chipflow") / "designs"))


def _summary(text: str) -> str:
    description = " ".join(str(tomllib.loads(text).get("description", "")).split())
    first = re.split(r"(?<=\.)\s+(?=[A-Z])", description, maxsplit=1)[0].rstrip(".")
    return first if len(first) <= 90 else first[:87].rstrip(" ,;") + "..."


def bundled_designs() -> list[BundledDesign]:
    """The installed design files, sorted by name."""
    return [
        BundledDesign(p.stem, p, _summary(p.read_text("utf-8")))
        for p in sorted(_folder().glob("*.toml"))
    ]


def resolve_design(arg: str | Path) -> Path:
    """The design file ``arg`` names: the file itself when it exists, else the bundled design
    of that name (with or without ``.toml``, or written as ``designs/NAME.toml``); otherwise
    ``arg`` unchanged, so the reader reports the missing file."""
    path = Path(arg)
    if path.exists():
        return path
    candidate = _folder() / f"{path.stem}.toml"
    if path.suffix in ("", ".toml") and path.parent.name in ("", "designs") and candidate.is_file():
        return candidate
    return path


def copy_bundled(design: str, name: str, folder: str | Path = ".") -> Path:
    """Copy the bundled ``design`` to ``<folder>/<name>.toml`` with its ``name`` set to ``name``.

    Never writes over an existing file. Raises :class:`SpecError` for an unknown design.
    """
    from chipflow.spec.starter import check_name

    stem = name[:-5] if name.endswith(".toml") else name
    check_name(stem)
    known = {d.name: d for d in bundled_designs()}
    key = Path(design).stem
    if key not in known:
        raise SpecError(
            f"no bundled design {design!r}; bundled designs: {', '.join(sorted(known))}"
        )
    text = known[key].path.read_text("utf-8")
    text, count = re.subn(r'(?m)^name\s*=\s*"[^"\n]*"', f'name = "{stem}"', text, count=1)
    if count == 0:
        text = f'name = "{stem}"\n' + text
    path = Path(folder) / f"{stem}.toml"
    if path.exists():
        raise SpecError(f"{path}: already exists; choose another name or remove it first")
    return atomic_write(path, lambda tmp: tmp.write_bytes(text.encode("utf-8")), "design file")
