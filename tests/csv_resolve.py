"""An independent re-solve of a written build, for the tests: the channels of channels.csv
(from/to, widths, depths, lengths) in a nodal analysis with the tests' own duct series."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np


def duct_resistance(w, h, length, mu, tube):
    """Hydraulic resistance written here [Pa s/m^3]: the exact Fourier series of a
    rectangular duct (Bruus, Theoretical Microfluidics, 2008, ch. 4; REFERENCES.md
    section 1), Hagen-Poiseuille for round tubes."""
    a, b = np.minimum(w, h), np.maximum(w, h)
    n = np.arange(1, 400, 2)[:, None]
    series = np.sum(np.tanh(n * np.pi * b / (2 * a)) / n**5, axis=0)
    rect = 12 * mu * length / (b * a**3) / (1 - 192 * a / (np.pi**5 * b) * series)
    return np.where(tube, 128 * mu * length / (np.pi * w**4), rect)


def resolve_csv(path: Path, viscosity: float, total_flow: float, feed: str, drain: str):
    """Channel flows [m^3/s] re-solved from channels.csv: the rows, and the flows."""
    rows = list(csv.DictReader(path.open()))
    names = sorted({r["from"] for r in rows} | {r["to"] for r in rows})
    index = {n: i for i, n in enumerate(names)}
    a = np.array([index[r["from"]] for r in rows])
    b = np.array([index[r["to"]] for r in rows])
    w = np.array([float(r["width [m]"]) for r in rows])
    h = np.array([float(r["depth [m]"]) for r in rows])
    length = np.array([float(r["length [m]"]) for r in rows])
    tube = np.array([r["round"] == "yes" for r in rows])
    g = 1.0 / duct_resistance(w, h, length, viscosity, tube)
    k = np.zeros((len(names), len(names)))
    np.add.at(k, (a, a), g)
    np.add.at(k, (b, b), g)
    np.add.at(k, (a, b), -g)
    np.add.at(k, (b, a), -g)
    free = [i for i in range(len(names)) if i != index[drain]]
    q = np.zeros(len(names))
    q[index[feed]] = total_flow
    p = np.zeros(len(names))
    p[free] = np.linalg.solve(k[np.ix_(free, free)], q[free])
    return rows, g * (p[a] - p[b])
