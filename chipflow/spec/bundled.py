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
    ``arg`` unchanged, so the reader reports the missing file. A name close to a bundled
    design's (``tree_vesel``) is a SpecError with a "did you mean"."""
    path = Path(arg)
    if path.exists():
        return path
    candidate = _folder() / f"{path.stem}.toml"
    bundled_name = path.suffix in ("", ".toml") and path.parent.name in ("", "designs")
    if bundled_name and candidate.is_file():
        return candidate
    if bundled_name:
        hint = _near(path.stem, [d.name for d in bundled_designs()])
        if hint:
            raise SpecError(f"{arg}: no such design file or bundled design{hint}")
    return path


def _near(name: str, names) -> str:
    """``"; did you mean 'x'?"`` for the closest of ``names``, or "" when none is close."""
    import difflib

    close = difflib.get_close_matches(name, list(names), n=1, cutoff=0.75)
    return f"; did you mean {close[0]!r}?" if close else ""


def _without_header(text: str) -> str:
    """The design text without its opening comment block (the lines before the first key or
    table, which describe the bundled design, not the copy).

    >>> _without_header("# the demo\\n#\\n\\nname = 'x'\\n# kept\\n")
    "name = 'x'\\n# kept\\n"
    """
    lines = text.splitlines(keepends=True)
    start = 0
    while start < len(lines) and (
        not lines[start].strip() or lines[start].lstrip().startswith("#")
    ):
        start += 1
    return "".join(lines[start:])


def copy_bundled(design: str, name: str, folder: str | Path = ".") -> Path:
    """Copy the bundled ``design`` to ``<folder>/<name>.toml`` with its ``name`` set to ``name``
    and a header comment about the copy in place of the bundled design's own.

    Never writes over an existing file. Raises :class:`SpecError` for an unknown design (with
    a "did you mean" for a near miss).
    """
    from chipflow.spec.starter import check_name

    stem = name[:-5] if name.endswith(".toml") else name
    check_name(stem)
    known = {d.name: d for d in bundled_designs()}
    key = Path(design).stem
    if key not in known:
        raise SpecError(
            f"no bundled design {design!r}{_near(key, known)} (bundled designs: "
            f"{', '.join(sorted(known))})"
        )
    text = _without_header(known[key].path.read_text("utf-8"))
    header = (
        f"# {stem}: a copy of chipflow's bundled design {key!r}, to edit\n"
        f"# (written by: chipflow new {stem} --from {key}). Build it with:\n#\n"
        f"#     chipflow build {stem}.toml\n#\n"
        "# Its values describe an invented scenario, not a recommendation for your cells or "
        "your\n# cleanroom: check them against your own measurements and your facility's "
        "design rules.\n\n"
    )
    text = header + text
    text, count = re.subn(r'(?m)^name\s*=\s*"[^"\n]*"', f'name = "{stem}"', text, count=1)
    if count == 0:
        text = f'name = "{stem}"\n' + text
    path = Path(folder) / f"{stem}.toml"
    if path.exists():
        raise SpecError(f"{path}: already exists; choose another name or remove it first")
    return atomic_write(path, lambda tmp: tmp.write_bytes(text.encode("utf-8")), "design file")
