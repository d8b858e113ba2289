"""Shared test fixtures."""

from __future__ import annotations

from pathlib import Path

import pytest

#: The bundled design files.
BUNDLED = sorted((Path(__file__).resolve().parents[1] / "designs").glob("*.toml"))


@pytest.fixture(scope="session")
def bundled_builds(tmp_path_factory) -> dict:
    """Each bundled design built once with its own settings, shared by the session's tests:
    design file name -> ``(Build, written files)``."""
    from chipflow.export.bundle import build_to_folder

    out = {}
    for path in BUNDLED:  # a dozen designs
        out[path.name] = build_to_folder(path, tmp_path_factory.mktemp(path.stem) / "out")
    return out


@pytest.fixture(scope="session")
def dask_scheduler():
    """The address of a small in-process Dask cluster (one worker, two threads)."""
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(
        n_workers=1, threads_per_worker=2, processes=False, dashboard_address=None
    ) as cluster:
        yield cluster.scheduler_address


def _stand_in_piece(key):
    """Equivalent lengths of a drawing's pieces without their 2D solves [m]: a tenth of a width
    for a port step, minus a tenth of each arm's width at a junction, minus 0.4 parent widths at
    a binary split (the values are tested in test_junctions.py; these stand-ins keep builds fast
    where only the build's plumbing is tested)."""
    from chipflow.layout import pieces

    if isinstance(key, pieces.PortKey):
        return pieces.PieceSolution((0.1 * key.width,))
    if isinstance(key, pieces.JunctionKey):
        return pieces.PieceSolution(tuple(-0.1 * arm.width for arm in key.arms))
    if hasattr(key, "n_ports"):  # a chamber: its network is its links (solved all the same)
        return pieces.PieceSolution((0.0,) * key.n_ports)
    return pieces.PieceSolution((-0.4 * key.parent_width, 0.0, 0.0))


@pytest.fixture
def plain_pieces(monkeypatch):
    """Builds in the test use :func:`_stand_in_piece` instead of the pieces' 2D solves."""
    from chipflow.layout import pieces

    monkeypatch.setattr(pieces, "solve_piece", _stand_in_piece)
