"""The channel network: nodes and channels held as arrays.

A :class:`Network` is a graph whose edges are straight channels (rectangular) or tubes
(round). Every per-channel attribute is a numpy array of the same length, so a network of a
million channels costs a few arrays, not a million objects. Large networks are built by code
with :meth:`Network.from_arrays`; small ones by name with :class:`NetworkBuilder`.

Examples
--------
>>> b = NetworkBuilder()
>>> b.tube("feed", "pump", "inlet", diameter=0.5e-3, length=0.3)
>>> b.channel("c1", "inlet", "outlet", width=200e-6, depth=50e-6, length=10e-3)
>>> net = b.build()
>>> net.n_nodes, net.n_channels, net.node_names
(3, 2, ('pump', 'inlet', 'outlet'))
>>> net.role.tolist()
['tubing', 'channel']
"""

from __future__ import annotations

import difflib
import functools
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from chipflow.errors import NetworkError

__all__ = ["Network", "NetworkBuilder", "NodeKey", "listing", "unknown_name_message"]

#: A node given by its index or by its name.
NodeKey = int | str

#: Default role of a rectangular channel and of a round tube.
DEFAULT_ROLE = "channel"
TUBE_ROLE = "tubing"


def listing(items: Sequence[object], limit: int = 8, total: int | None = None) -> str:
    """Comma-separated ``items``, truncated after ``limit`` with a count of the rest.

    ``total`` is the full count when ``items`` holds only the first few.

    >>> listing(["a", "b", "c"], limit=2)
    'a, b and 1 more'
    """
    total = len(items) if total is None else total
    shown = [str(i) for i in items[:limit]]
    if total <= len(shown):
        return ", ".join(shown)
    return f"{', '.join(shown)} and {total - len(shown)} more"


def _array(value: ArrayLike, dtype, what: str, n: int | None = None) -> np.ndarray:
    try:
        arr = np.asarray(value, dtype=dtype)
    except (TypeError, ValueError):
        raise NetworkError(f"channel {what}: expected numbers, got {value!r:.60}") from None
    if arr.ndim == 0 and n is not None:
        arr = np.full(n, arr, dtype=dtype)
    if arr.ndim != 1:
        raise NetworkError(f"channel {what}: expected a one-dimensional array")
    if n is not None and arr.shape[0] != n:
        raise NetworkError(f"channel {what}: {arr.shape[0]} values for {n} channels")
    return arr


@dataclass(frozen=True, eq=False, repr=False)
class Network:
    """Nodes and channels of a hydraulic network, all per-channel data as arrays.

    Build it with :meth:`from_arrays` or :class:`NetworkBuilder`, which validate; the
    attributes are not meant to be modified afterwards.

    Attributes
    ----------
    node_a, node_b : numpy.ndarray of int
        End nodes of each channel; a positive flow runs from ``node_a`` to ``node_b``.
    width, depth : numpy.ndarray of float
        Channel cross-section [m]; for round tubes both hold the inner diameter.
    length : numpy.ndarray of float
        Channel length [m].
    round : numpy.ndarray of bool
        True for round tubes (tubing), False for rectangular channels.
    generation : numpy.ndarray of int
        Generation of each channel in a branching tree, -1 where it has none.
    role : numpy.ndarray of str
        What the channel does: "distribution", "bed", "collection", "tubing", "port",
        "channel", ...
    node_names : tuple of str
        Name of every node, in index order.
    names : tuple of str or None
        Channel names; None means the default names ``c0``, ``c1``, ... (see
        :meth:`channel_names`).
    region : numpy.ndarray of str or None
        The culture region of each channel ("" for shared channels, tubing); None: no
        regions (every channel "").
    """

    node_a: np.ndarray
    node_b: np.ndarray
    width: np.ndarray
    depth: np.ndarray
    length: np.ndarray
    round: np.ndarray
    generation: np.ndarray
    role: np.ndarray
    node_names: tuple[str, ...]
    names: tuple[str, ...] | None = None
    region: np.ndarray | None = None

    # -- construction ---------------------------------------------------------------------
    @classmethod
    def from_arrays(
        cls,
        node_a: ArrayLike,
        node_b: ArrayLike,
        width: ArrayLike,
        depth: ArrayLike,
        length: ArrayLike,
        *,
        round: ArrayLike | None = None,
        names: Sequence[str] | None = None,
        generation: ArrayLike | None = None,
        role: ArrayLike | None = None,
        node_names: Sequence[str] | None = None,
        n_nodes: int | None = None,
        region: ArrayLike | None = None,
    ) -> Network:
        """A validated network from per-channel arrays.

        Parameters
        ----------
        node_a, node_b : array_like of int
            End node indices of each channel (0-based).
        width, depth, length : array_like of float
            Cross-section and length of each channel [m] (scalars broadcast). For a round
            tube width and depth both hold the inner diameter.
        round : array_like of bool, optional
            True for round tubes; default all rectangular.
        names : sequence of str, optional
            Unique channel names; default ``c0``, ``c1``, ...
        generation : array_like of int, optional
            Tree generation of each channel; -1 (default) for none.
        role : array_like of str, optional
            Role of each channel; default "tubing" for round tubes, "channel" otherwise.
        node_names : sequence of str, optional
            Unique node names; default ``n0``, ``n1``, ...
        n_nodes : int, optional
            Number of nodes; default ``len(node_names)`` or the largest index plus one.
        region : array_like of str, optional
            Culture region of each channel ("" for none); default: no regions.

        Raises
        ------
        NetworkError
            On mismatched lengths, bad node indices, a channel whose two ends are the same
            node, non-positive or non-finite sizes, a tube whose width and depth differ, or
            duplicated channel or node names.

        Examples
        --------
        Two channels in series between nodes 0, 1 and 2:

        >>> net = Network.from_arrays([0, 1], [1, 2], 100e-6, 50e-6, [1e-3, 2e-3])
        >>> net.n_channels, net.node_names
        (2, ('n0', 'n1', 'n2'))
        >>> Network.from_arrays([0], [0], 1e-4, 1e-4, 1e-3)  # doctest: +ELLIPSIS
        Traceback (most recent call last):
        ...
        chipflow.errors.NetworkError: channel c0 starts and ends at the same node n0; ...
        """
        a = _array(node_a, float, "node_a")
        n = a.shape[0]
        b = _array(node_b, float, "node_b", n)
        for arr, what in ((a, "node_a"), (b, "node_b")):
            if n and not (np.all(np.isfinite(arr)) and np.all(arr == np.floor(arr))):
                raise NetworkError(f"channel {what}: node indices must be whole numbers")
        a = a.astype(np.int64)
        b = b.astype(np.int64)
        w = _array(width, float, "width", n)
        h = _array(depth, float, "depth", n)
        ln = _array(length, float, "length", n)
        rnd = np.zeros(n, bool) if round is None else _array(round, bool, "round", n)
        gen = (
            np.full(n, -1, np.int64)
            if generation is None
            else _array(generation, np.int64, "generation", n)
        )
        if role is None:
            rl = np.where(rnd, TUBE_ROLE, DEFAULT_ROLE)
        else:
            rl = np.asarray(role, dtype=str)
            if rl.ndim == 0:
                rl = np.full(n, rl)
            rl = _array(rl, str, "role", n)
        chan_names = None if names is None else tuple(str(s) for s in names)
        if chan_names is not None and len(chan_names) != n:
            raise NetworkError(f"channel names: {len(chan_names)} names for {n} channels")

        if node_names is not None:
            nodes = tuple(str(s) for s in node_names)
            if n_nodes is not None and n_nodes != len(nodes):
                raise NetworkError(f"{len(nodes)} node names for n_nodes={n_nodes}")
        else:
            count = int(max(a.max(initial=-1), b.max(initial=-1))) + 1
            count = count if n_nodes is None else int(n_nodes)
            nodes = None
        count = len(nodes) if nodes is not None else count
        if n and (min(a.min(), b.min()) < 0 or max(a.max(), b.max()) >= count):
            bad = np.flatnonzero((a < 0) | (b < 0) | (a >= count) | (b >= count))
            shown = listing(bad[:8].tolist(), total=bad.size)
            raise NetworkError(f"channels {shown}: node index outside 0..{count - 1}")
        reg = None
        if region is not None:
            reg = _array(np.asarray(region, dtype=str), str, "region", n)
            reg = reg if np.any(reg != "") else None
        net = cls(a, b, w, h, ln, rnd, gen, rl, nodes or (), chan_names, reg)
        if nodes is None:
            object.__setattr__(net, "node_names", tuple(f"n{i}" for i in range(count)))
        net._validate()
        return net

    def _validate(self) -> None:
        # Sizes: positive and finite.
        for arr, what in ((self.width, "width"), (self.depth, "depth"), (self.length, "length")):
            bad = ~(np.isfinite(arr) & (arr > 0))
            if bad.any():
                idx = np.flatnonzero(bad)
                raise NetworkError(
                    f"channel {self._names_of(idx)}: {what} must be a positive length, got "
                    f"{arr[idx[0]]:g} m"
                )
        tube_mismatch = self.round & (self.width != self.depth)
        if tube_mismatch.any():
            idx = np.flatnonzero(tube_mismatch)
            raise NetworkError(
                f"tube {self._names_of(idx)}: width and depth must both be the inner diameter"
            )
        loops = self.node_a == self.node_b
        if loops.any():
            idx = np.flatnonzero(loops)
            raise NetworkError(
                f"channel {self._names_of(idx)} starts and ends at the same node "
                f"{self.node_names[self.node_a[idx[0]]]}; a channel must join two different nodes"
            )
        _check_unique(self.node_names, "node")
        if self.names is not None:
            _check_unique(self.names, "channel")

    def __repr__(self) -> str:
        return f"<Network: {self.n_nodes} nodes, {self.n_channels} channels>"

    # -- sizes and names ------------------------------------------------------------------
    @property
    def n_nodes(self) -> int:
        """Number of nodes."""
        return len(self.node_names)

    @property
    def n_channels(self) -> int:
        """Number of channels (tubes included)."""
        return int(self.node_a.shape[0])

    def channel_names(self) -> tuple[str, ...]:
        """Names of all channels (``c0``, ``c1``, ... where none were given)."""
        if self.names is not None:
            return self.names
        return tuple(f"c{i}" for i in range(self.n_channels))

    def channel_name(self, index: int) -> str:
        """Name of channel ``index``."""
        return self.names[index] if self.names is not None else f"c{index}"

    def regions(self) -> np.ndarray:
        """The culture region of every channel ("" for shared channels and tubing)."""
        if self.region is None:
            return np.full(self.n_channels, "", dtype="<U1")
        return self.region

    def _names_of(self, indices: np.ndarray) -> str:
        return listing([self.channel_name(int(i)) for i in indices[:8]], total=len(indices))

    @functools.cached_property
    def _node_index(self) -> dict[str, int]:
        return {name: i for i, name in enumerate(self.node_names)}

    def node_index(self, key: NodeKey) -> int:
        """Index of a node given by index or name.

        Raises
        ------
        NetworkError
            For an unknown name or an index out of range, with the nearest valid name.

        Examples
        --------
        >>> net = Network.from_arrays([0], [1], 1e-4, 1e-4, 1e-3, node_names=["in", "out"])
        >>> net.node_index("out"), net.node_index(0)
        (1, 0)
        >>> net.node_index("outlet")  # doctest: +ELLIPSIS
        Traceback (most recent call last):
        ...
        chipflow.errors.NetworkError: unknown node 'outlet'; did you mean 'out'? ...
        """
        if isinstance(key, bool):
            raise NetworkError(f"unknown node {key!r}")
        if isinstance(key, int | np.integer):
            if 0 <= key < self.n_nodes:
                return int(key)
            raise NetworkError(f"node index {key} outside 0..{self.n_nodes - 1}")
        index = self._node_index.get(str(key))
        if index is None:
            raise NetworkError(unknown_name_message(str(key), self.node_names, "node"))
        return index

    def node_name(self, index: int) -> str:
        """Name of node ``index``."""
        return self.node_names[index]


def unknown_name_message(key: str, valid: Sequence[str], what: str) -> str:
    """'unknown node 'x'; did you mean 'y'? (known nodes: ...)' for messages."""
    near = difflib.get_close_matches(key, list(valid)[:10000], n=1, cutoff=0.6)
    hint = f"; did you mean '{near[0]}'?" if near else ""
    shown = listing(list(valid[:8]), total=len(valid))
    return f"unknown {what} {key!r}{hint} (known {what}s: {shown})"


def _check_unique(names: Sequence[str], what: str) -> None:
    if len(set(names)) == len(names):
        return
    values, counts = np.unique(np.asarray(names, dtype=str), return_counts=True)
    dup = values[counts > 1].tolist()
    raise NetworkError(
        f"duplicated {what} name{'s' if len(dup) > 1 else ''} {listing(dup)}; "
        f"every {what} needs its own name"
    )


def _sizes(name: object, **values: object) -> tuple[float, ...]:
    """The sizes [m] of one channel as floats, or a NetworkError naming the channel."""
    out = []
    for what, value in values.items():
        if isinstance(value, bool) or not isinstance(value, int | float | np.integer | np.floating):
            hint = " (convert text with chipflow.units.to_si)" if isinstance(value, str) else ""
            raise NetworkError(
                f"channel {name!r}: {what} must be a number of metres, got {value!r:.60}{hint}"
            )
        number = float(value)
        if not (np.isfinite(number) and number > 0):
            raise NetworkError(
                f"channel {name!r}: {what} must be a positive length, got {number:g} m"
            )
        out.append(number)
    return tuple(out)


def _labels(name: object, **values: object) -> None:
    if not isinstance(name, str) or not name:
        raise NetworkError(f"a channel name must be non-empty text, got {name!r:.60}")
    for what, value in values.items():
        if not isinstance(value, str) or not value:
            raise NetworkError(
                f"channel {name!r}: {what} must be non-empty text, got {value!r:.60}"
            )


class NetworkBuilder:
    """Build a small network by name, one channel or tube at a time.

    Nodes are created on first mention (or declared with :meth:`node` to fix their order).
    This is for hand-drawn networks of up to a few thousand channels; large generated
    networks should go through :meth:`Network.from_arrays` directly.

    Examples
    --------
    A loop of two channels between "a" and "b":

    >>> b = NetworkBuilder()
    >>> b.channel("upper", "a", "b", width=100e-6, depth=50e-6, length=5e-3)
    >>> b.channel("lower", "a", "b", width=100e-6, depth=50e-6, length=5e-3)
    >>> b.build().n_channels
    2
    """

    def __init__(self) -> None:
        self._nodes: dict[str, int] = {}
        self._rows: list[tuple] = []

    def node(self, name: str) -> int:
        """Declare a node (idempotent) and return its index."""
        return self._nodes.setdefault(str(name), len(self._nodes))

    def channel(
        self,
        name: str,
        a: str,
        b: str,
        *,
        width: float,
        depth: float,
        length: float,
        generation: int = -1,
        role: str = DEFAULT_ROLE,
    ) -> None:
        """Add a rectangular channel from node ``a`` to node ``b``.

        Parameters
        ----------
        width, depth, length : float
            [m].
        generation : int
            Tree generation, -1 for none.
        role : str
            "distribution", "bed", "collection", "channel", ...

        Raises
        ------
        NetworkError
            A size that is not a finite positive number of metres (text such as ``"200 um"``
            included: convert it with :func:`chipflow.units.to_si`), a generation that is not
            a whole number of at least -1, or a name, node or role that is not text.
        """
        sizes = _sizes(name, width=width, depth=depth, length=length)
        _labels(name, a=a, b=b, role=role)
        if isinstance(generation, bool) or not isinstance(generation, int | np.integer):
            raise NetworkError(f"channel {name!r}: generation must be a whole number, got "
                               f"{generation!r:.60}")  # fmt: skip
        if generation < -1:
            raise NetworkError(f"channel {name!r}: generation must be -1 (none) or more")
        self._rows.append(
            (str(name), self.node(a), self.node(b), *sizes, False, int(generation), role)
        )

    def tube(
        self,
        name: str,
        a: str,
        b: str,
        *,
        diameter: float,
        length: float,
        role: str = TUBE_ROLE,
    ) -> None:
        """Add a round tube of inner ``diameter`` [m] and ``length`` [m] from ``a`` to ``b``
        (the same checks as :meth:`channel`)."""
        d, _, ln = _sizes(name, diameter=diameter, depth=diameter, length=length)
        _labels(name, a=a, b=b, role=role)
        self._rows.append((str(name), self.node(a), self.node(b), d, d, ln, True, -1, role))

    def build(self) -> Network:
        """The validated :class:`Network`."""
        if not self._rows:
            raise NetworkError("the network has no channels")
        cols = list(zip(*self._rows, strict=True))
        return Network.from_arrays(
            cols[1],
            cols[2],
            cols[3],
            cols[4],
            cols[5],
            round=cols[6],
            generation=cols[7],
            role=cols[8],
            names=cols[0],
            node_names=tuple(self._nodes),
        )
