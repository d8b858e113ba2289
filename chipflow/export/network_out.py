"""A mask's skeleton written as an explicit network design file (``analyse --network-out``).

Each skeleton branch (:class:`chipflow.field.skeleton.ChannelTable`) becomes a ``[[channels]]``
entry of its mean width and the mask's depth, between nodes where branch ends meet (ends
within a fifth of the narrowest branch width are one node) or at a port hole (the port's
node). Its ``length`` is the branch's *equivalent length*: the length at which a duct of that
width and depth has the resistance the field gives the branch (its pressure drop over its
flow), so the junctions and bends the field sees stay in the network; the skeleton's
centreline length is written beside it as a comment. The inlet gets the analysis's flow (or
pressure), the other ports open outlets at 0 Pa, and the fluid is written with the values the
analysis used. ``chipflow check`` solves the file; edit widths and lengths to try changes.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

from chipflow.errors import ExportError
from chipflow.export._files import atomic_write

__all__ = ["network_toml", "write_network"]


def _q(value: float) -> str:
    return f"{value:.12g}"


def network_toml(
    table,
    ports: Sequence[tuple[str, tuple[float, float], float]],
    supply: Mapping[str, tuple[str, float]],
    fluid,
    name: str,
    source: str,
) -> str:
    """The design file text of the skeleton network (see the module docstring).

    Parameters
    ----------
    table : ChannelTable
        The skeleton branches with their field flows and pressure drops [SI].
    ports : sequence of (str, (float, float), float)
        Each port's name, centre [m] and hole radius [m].
    supply : mapping of str to (str, float)
        Port name -> ("flow", [m^3/s]) or ("pressure", [Pa]); ports not named are outlets
        at 0 Pa.
    fluid : Fluid
        The fluid of the analysis (viscosity, density, temperature).
    name, source : str
        Design name, and the mask file it came from (for the description).

    Raises
    ------
    ExportError
        No skeleton table (its reason), or a branch end at no node.
    """
    if table.reason is not None or len(table.length) == 0:
        raise ExportError(f"--network-out: {table.reason or 'the skeleton has no branch'}")
    ends = np.vstack([table.start, table.end])  # (2n, 2): starts then ends
    n = len(table.length)
    node = np.full(2 * n, -1)
    names: list[str] = []
    for port, centre, radius in ports:  # a few ports
        near = np.hypot(*(ends - np.asarray(centre)).T) <= radius * 1.05 + 0.2 * table.width.min()
        node[near & (node < 0)] = len(names)
        names.append(port)
    tol = 0.2 * float(table.width.min())
    for i in range(2 * n):  # cluster junction ends: a few hundred ends at most
        if node[i] >= 0:
            continue
        near = (np.hypot(*(ends - ends[i]).T) <= tol) & (node < 0)
        node[near] = len(names)
        names.append(f"j{len(names) - len(ports) + 1}")
    per_length = table.resistance_1d / table.length  # the duct of the branch's cross-section
    with np.errstate(divide="ignore", invalid="ignore"):
        field = np.where(table.flow != 0, table.pressure_drop / table.flow, np.nan)
    equivalent = np.where(np.isfinite(field) & (field > 0), field / per_length, table.length)
    lines = [
        f"# chipflow analyse --network-out: the skeleton of {source} as an explicit network",
        "# (lengths are equivalent lengths: the field's resistance of each branch; the",
        "# skeleton's centreline length follows each as a comment)",
        f"name = {_toml_string(name)}",
        f"description = {_toml_string(f'The skeleton of the mask {source}, as analysed.')}",
        "",
        "[fluid]",
        'kind = "custom"',
        f'viscosity = "{_q(fluid.viscosity)} Pa*s"',
        f'density = "{_q(fluid.density)} kg/m^3"',
    ]
    if fluid.temperature is not None:
        lines.append(f'temperature = "{_q(fluid.temperature - 273.15)} degC"')
    lines.append("")
    for label in names:
        lines += ["[[nodes]]", f"name = {_toml_string(label)}", ""]
    for i in range(n):  # one entry per branch
        lines += [
            "[[channels]]",
            f'name = "branch {i + 1}"',
            f"from = {_toml_string(names[node[i]])}",
            f"to = {_toml_string(names[node[n + i]])}",
            f'width = "{_q(table.width[i] * 1e6)} um"',
            f'depth = "{_q(table.depth[i] * 1e6)} um"',
            f'length = "{_q(equivalent[i] * 1e3)} mm"  # centreline {_q(table.length[i] * 1e3)} mm',
            "",
        ]
    for port, _, _ in ports:
        kind, value = supply.get(port, ("pressure", 0.0))
        text = f'"{_q(value * 6e10)} uL/min"' if kind == "flow" else f'"{_q(value)} Pa"'
        lines += ["[[ports]]", f"node = {_toml_string(port)}", f"{kind} = {text}", ""]
    return "\n".join(lines)


def _toml_string(text: str) -> str:
    return '"' + str(text).replace("\\", "\\\\").replace('"', '\\"') + '"'


def write_network(text: str, path: str | os.PathLike) -> Path:
    """Write the network design text to ``path`` (atomically)."""
    return atomic_write(path, lambda tmp: Path(tmp).write_bytes(text.encode("utf-8")), "network")
