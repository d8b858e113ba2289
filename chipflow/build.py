"""The whole job in one call: design file -> sizing -> drawing -> network -> solution -> checks.

:func:`build_design` runs every stage on a design file and returns a :class:`Build`: the sized
design, the drawn layout, the solved network, the checks and the results (a JSON-able dict of
SI values). Writing the files is :func:`chipflow.export.bundle.write_build`'s job; nothing here
writes anything.

Two kinds of design file build:

- **tree designs** (a ``[tree]`` table) are sized, drawn on the chip, extracted back into a
  network from the drawing (so the solver sees exactly the geometry of the mask), connected to
  their supply and tubing, solved and checked;
- **explicit networks** (``[[channels]]``/``[[tubes]]``) are drawn when every node a channel
  touches has ``at`` (the same engine as trees: masks, ports, pieces, the network extracted from
  the drawing with its tubing added), and otherwise solved and checked as given (no mask
  files; their channels' widths and depths still meet the fabrication rules).

Stages report their name to an optional ``progress`` callable, for the command line.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from chipflow.checks import CheckResult, fabrication_results, worst_status
from chipflow.checks.cell_types import ShearWindow
from chipflow.checks.culture import check_floor_outside
from chipflow.checks.suite import bed_grader, culture_checks, pressure_checks, transport_checks
from chipflow.design.model import TreeDesign
from chipflow.design.sizing import size_tree
from chipflow.errors import ChipflowError, SpecError
from chipflow.layout.model import Layout
from chipflow.network import Solution
from chipflow.network.summary import channel_rows, level_rows, port_pressure_range
from chipflow.network.supply import Supply, boundary_conditions, with_tubing
from chipflow.operation import Operation, operate, steady_boundary
from chipflow.operation.run import attach
from chipflow.operation.softwall import solve_operating_point
from chipflow.physics.fluid import Fluid
from chipflow.spec.culture import read_culture, read_limits
from chipflow.spec.export import ExportSettings, read_export
from chipflow.spec.network import is_network_design, load_network_design
from chipflow.spec.operation import read_tree_operation
from chipflow.spec.reader import Table, parse_design_text
from chipflow.spec.supply import AUTO_PRESSURE_LABEL, SupplySpec, read_supply
from chipflow.spec.tolerances import read_tolerances
from chipflow.spec.transport import read_transport
from chipflow.spec.tree import load_tree_spec
from chipflow.transport.run import run_transport
from chipflow.units import RESULT_UNITS

__all__ = [
    "Build",
    "DesignSource",
    "read_design_source",
    "build_design",
    "nominal_tree",
    "RESULT_UNITS",
]

#: Units of the SI values in the results (keys as they appear anywhere in the dict).

Progress = Callable[[str], None]


@dataclass(frozen=True)
class DesignSource:
    """A design file as read: its parsed top-level table and the SHA-256 of its bytes."""

    path: str
    top: Table
    sha256: str

    @classmethod
    def from_dict(cls, data: dict[str, Any], path: str = "<memory>.toml") -> DesignSource:
        """A design held in memory, e.g. a parsed file with one value changed.

        The hash is taken over the canonical JSON form of ``data``.

        >>> source = DesignSource.from_dict({"tree": {"flow": "5 uL/min"}}, "sweep.toml")
        >>> source.top.table("tree").quantity("flow", "flow") > 0
        True
        """
        canonical = json.dumps(data, sort_keys=True, separators=(",", ":"), default=str)
        digest = hashlib.sha256(canonical.encode("utf-8")).hexdigest()
        return cls(path, Table(data, path, ""), digest)


def read_design_source(path: str | Path, settings: Sequence[str] = ()) -> DesignSource:
    """Read and parse a design file, keeping the hash of its exact bytes.

    Parameters
    ----------
    path : str or path-like
        The design file.
    settings : sequence of str, optional
        ``KEY=VALUE`` settings (``--set``) applied to the file's text before it is parsed
        (:mod:`chipflow.spec.overrides`): the source is then exactly that of the file with
        those values edited, its hash the hash of the edited text.
    """
    from chipflow.spec.reader import read_design_bytes

    raw = read_design_bytes(path)
    if settings:
        from chipflow.spec.overrides import apply_settings, parse_setting

        bom = b"\xef\xbb\xbf" if raw.startswith(b"\xef\xbb\xbf") else b""
        text = apply_settings(
            raw.decode("utf-8-sig"), [parse_setting(s) for s in settings], str(path)
        )
        raw = bom + text.encode("utf-8")
    top = parse_design_text(raw.decode("utf-8-sig"), str(path))
    return DesignSource(str(path), top, hashlib.sha256(raw).hexdigest())


@dataclass(frozen=True)
class Build:
    """Everything one build produced (no files).

    Attributes
    ----------
    source : DesignSource
    name, description : str
    fluid : Fluid
    design : TreeDesign, RegionsDesign or None
        The sized tree, or the sized chip of several culture regions
        (:class:`chipflow.design.regions.RegionsDesign`; None for an explicit network).
    layout : Layout or None
        The drawing (None for an explicit network).
    solution : Solution
        The solved network, tubing included.
    checks : tuple of CheckResult
    export : ExportSettings or None
        Mask-file options (None when there is nothing to draw).
    results : dict
        JSON-able results in SI units (see :data:`RESULT_UNITS`).
    field : FieldRun or None
        The field solve of the drawing and its comparison with the network (None when it
        was not run).
    operation : Operation or None
        Time-varying operation: pulsation, draining, rocking, wall deformation.
    transport : TransportRun or None
        Oxygen and solutes along the channels, the dosing delay (and, with the field, the
        oxygen map): :func:`chipflow.transport.run_transport`.
    chambers : tuple of ChamberRun
        Each chamber at the operating point (:func:`chipflow.field.chambers.chamber_runs`).
    """

    source: DesignSource
    name: str
    description: str
    fluid: Fluid
    design: Any  # TreeDesign, RegionsDesign or None
    layout: Layout | None
    solution: Solution
    checks: tuple[CheckResult, ...]
    export: ExportSettings | None
    results: dict[str, Any] = dataclasses.field(repr=False)
    field: Any = dataclasses.field(default=None, repr=False)
    operation: Operation | None = dataclasses.field(default=None, repr=False)
    transport: Any = dataclasses.field(default=None, repr=False)
    chambers: tuple = dataclasses.field(default=(), repr=False)

    @property
    def status(self) -> str:
        """ "pass", "warn" or "fail": the worst of the checks."""
        return worst_status(self.checks)

    def _repr_html_(self) -> str:
        """A notebook shows the verdict, the level table and the profile figure."""
        from chipflow.report.notebook import build_html

        return build_html(self.results)


def _noop(stage: str) -> None:
    return None


def build_design(
    source: DesignSource | str | Path,
    progress: Progress | None = None,
    *,
    allow_large: bool = False,
    field: bool | None = None,
) -> Build:
    """Run every stage on a design file.

    Parameters
    ----------
    source : DesignSource or path
        The design file.
    progress : callable, optional
        Called with the name of each stage as it starts.
    allow_large : bool, optional
        Draw a tree, and solve its field, even when they need more memory than this process
        may use (see :func:`chipflow.layout.budget.check_size` and
        :mod:`chipflow.field.budget`); by default such a tree or field is refused.
    field : bool, optional
        Solve the 2D field of the drawing and compare it with the network. By default only
        when the field is estimated to take at most 10 s and 1 GB
        (:func:`chipflow.field.budget.field_by_default`). An explicit network without
        coordinates has no drawing: asking for its field is an error.

    Returns
    -------
    Build

    Raises
    ------
    ChipflowError
        Bad input (SpecError), targets that cannot be met (DesignError), a design that does
        not fit on the chip (LayoutError) or in memory (TooLargeError), an unsolvable network
        (NetworkError).
    """
    progress = progress or _noop
    if not isinstance(source, DesignSource):
        progress("load")
        source = read_design_source(source)
    top = source.top
    try:
        if "tree" in top:
            return _build_tree(source, progress, allow_large, field)
        if is_network_design(top):
            return _build_network(source, progress, field, allow_large)
    except ChipflowError as exc:
        # every message names the design file once, whichever stage raised it
        if source.path in str(exc):
            raise
        raise type(exc)(f"{source.path}: {exc}") from None
    raise SpecError(
        f"{top.source}: nothing to build: expected a [tree] table or an explicit network "
        "([[channels]] and/or [[tubes]] with [[ports]])"
    )


# -- tree designs -------------------------------------------------------------------------------
def _build_tree(
    source: DesignSource,
    progress: Progress,
    allow_large: bool = False,
    run_field: bool | None = None,
) -> Build:
    from chipflow.layout import LayoutRules, check_rules, draw, extract_network
    from chipflow.layout.budget import check_size
    from chipflow.layout.extract import unsolved_junctions
    from chipflow.spec.chip import read_chip

    top = source.top
    spec = load_tree_spec(top)
    culture, limits = read_culture(top), read_limits(top)
    timing = read_tree_operation(top, spec.flow)
    supply = read_supply(top, timing.inlet_flow(spec.flow))
    chip, port_keepout = read_chip(top)
    export = read_export(top, design_hash=f"sha256:{source.sha256[:16]}")
    read_tolerances(top)  # used by chipflow vary; checked here so that a typo fails early
    transport_spec = read_transport(top)
    progress("size")
    if spec.regions:
        design, layout = _regions_drawn(spec, culture, transport_spec, chip, port_keepout,
                                        allow_large, progress)  # fmt: skip
        rules = LayoutRules.from_fabrication(design.fabrication, **_keepout(port_keepout))
    else:
        grade = None  # a chamber's last generation is no seeded bed: nothing to grade
        if spec.bed.kind == "channels":
            grade = bed_grader(
                culture,
                spec.flow,
                spec.bed_channels,
                spec.bed.residence_time,
                spec.bed.length,
                transport=transport_spec,
                temperature=spec.fluid.temperature,
            )
        design = size_tree(spec, bed_grade=grade)
        count = sum(level.count for level in design.levels)
        if design.mesh is not None:  # segments and cross-connections: two per row and channel
            count += 2 * design.bed.count * math.ceil(design.bed.length / design.mesh[0])
        check_size(count, allow_large=allow_large)
        progress("layout")
        rules = LayoutRules.from_fabrication(design.fabrication, **_keepout(port_keepout))
        layout = draw(design, chip, rules)
    progress("extract")
    network, feed, drain = with_tubing(
        extract_network(layout),
        supply.tubing_diameter,
        supply.inlet_tubing,
        supply.outlet_tubing,
    )
    progress("solve")
    pressures, flows = boundary_conditions({feed: supply.inlet, drain: supply.outlet}, spec.fluid)
    timing = timing.renamed({"inlet": feed, "outlet": drain})
    pressures, flows = steady_boundary(timing, network, spec.fluid, pressures, flows, feed, drain)
    soft = solve_operating_point(timing.walls, network, spec.fluid, pressures, flows)
    if supply.pressure_for_flow is not None:
        # The pressure at the feed under the design flow is the pressure a controller must
        # hold to give that flow (also on soft roofs: the same operating point). Solve again
        # driven by it.
        held = Supply("pressure", soft.solution.node_pressure(feed), AUTO_PRESSURE_LABEL)
        supply = replace(supply, inlet=held)
        pressures, flows = boundary_conditions({feed: held, drain: supply.outlet}, spec.fluid)
        soft = solve_operating_point(timing.walls, network, spec.fluid, pressures, flows)
    solution = soft.solution
    progress("check")
    findings = check_rules(layout, rules)
    targets = _targets_window(spec)
    window = culture.window or targets
    generations = level_rows(solution)
    chambers = [
        (c.name, c.key, [layout.node_names[n] for n in c.port_nodes]) for c in layout.chambers
    ]
    runs = _chamber_runs(chambers, soft.rigid, culture.window, progress)
    residence_target = culture.residence_time or spec.bed.residence_time
    region_windows = {r.name: _cell_window(r.cell_type) for r in spec.regions if r.cell_type}
    residence_targets = {
        r.name: culture.residence_time or r.tree.bed.residence_time for r in spec.regions
    }
    operation = operate(
        timing, solution, generations, window, culture.seeded, feed, drain, limits, soft=soft
    )
    progress("transport")
    transport = run_transport(solution, culture, transport_spec)
    checks = (
        *culture_checks(
            solution,
            generations,
            culture,
            culture.window,
            residence_target,
            targets=targets,
            target_kind=spec.targets.kind,
            target_levels=spec.targets.levels,
            oscillating=operation.oscillating,
            region_windows=region_windows,
            residence_targets=residence_targets,
        ),
        *_chamber_checks(runs, culture),
        *transport_checks(transport),
        *pressure_checks(solution, limits),
        *operation.checks,
        *fabrication_results(findings),
    )
    results = _results(
        source,
        spec.name,
        spec.description,
        spec.fluid,
        _supply_dict(supply),
        solution,
        generations,
        checks,
        window,
    )
    attach(results, operation)
    results["regions"] = region_results(spec, layout, solution)
    results["mesh"] = mesh_results(design, solution, soft.rigid, pressures, flows)
    results["fabrication"] = _fabrication_dict(layout, export, findings)
    results["chambers"] = _chamber_dicts(runs, window)
    if results["chambers"] and results["totals"]["transit_time"] is not None:
        # a tree's one chamber is the one it ends in: every path through the chip crosses it
        results["totals"]["transit_time"] += sum(c["residence_time"] for c in results["chambers"])
    results["ports"] = mask_ports(layout, export.dxf.mirror)
    results["warnings"] = [
        *design.warnings,
        *layout.notes,
        *layout.warnings,
        *unsolved_junctions(layout),
    ]
    field_run = _field(
        layout,
        soft.rigid,  # the field models rigid walls: compare it with the rigid network
        spec.fluid.viscosity,
        window,
        culture.seeded,
        supply.inlet.kind == "flow",
        run_field,
        progress,
        results["warnings"],
        allow_large,
    )
    field_run = _composed_apart(field_run, results)
    checks, transport = _field_outcome(
        field_run, checks, transport, results, layout, culture, window, progress
    )
    results["transport"] = transport.results
    return Build(
        source,
        spec.name,
        spec.description,
        spec.fluid,
        design,
        layout,
        solution,
        tuple(checks),
        export,
        results,
        field_run,
        operation,
        transport,
        tuple(runs),
    )


def mesh_results(design, solution: Solution, rigid: Solution, pressures, flows):
    """The ``mesh`` block of results.json: a mesh bed's rows, its cross-connection flows
    (:func:`chipflow.network.mesh.cross_flows`) and the middle bed channel narrowed to half
    its width (:func:`chipflow.network.mesh.narrowed_bed`, on the rigid network); None for
    a bed without cross-connections."""
    if getattr(design, "mesh", None) is None:
        return None
    from chipflow.network.mesh import bed_channels, cross_flows, narrowed_bed

    found = cross_flows(solution)
    if found is None:
        return None
    names, _ = bed_channels(solution.network)
    narrowed = narrowed_bed(rigid, names[len(names) // 2], 0.5, pressures, flows)
    narrowed.pop("solution")
    pitch, width = design.mesh
    return {
        "cross_pitch": pitch,
        "cross_width": width,
        "rows": found["cross_connections"] // max(len(names) - 1, 1),
        **found,
        "narrowed": narrowed,
    }


def _keepout(port_keepout: float | None) -> dict[str, float]:
    return {} if port_keepout is None else {"port_keepout": port_keepout}


def _cell_window(name: str) -> ShearWindow:
    from chipflow.checks.cell_types import cell_type

    return cell_type(name).window()


def _regions_drawn(spec, culture, transport_spec, chip, port_keepout, allow_large, progress):
    """Size and draw a chip of several culture regions (``[[regions]]``): each region's bed
    graded with its own flow and cells, the feeders drawn to give every region its share."""
    from chipflow.design.regions import size_regions
    from chipflow.layout import LayoutRules
    from chipflow.layout.budget import check_size
    from chipflow.layout.regions import draw_regions

    grades = {}
    for r in spec.regions:  # a handful of regions
        own = culture if r.cell_type is None else replace(culture, window=_cell_window(r.cell_type))
        grades[r.name] = bed_grader(
            own,
            r.tree.flow,
            r.tree.bed_channels,
            r.tree.bed.residence_time,
            r.tree.bed.length,
            transport=transport_spec,
            temperature=spec.fluid.temperature,
        )
    design = size_regions(spec, grades)
    check_size(design.channel_count, allow_large=allow_large)
    progress("layout")
    rules = LayoutRules.from_fabrication(design.fabrication, **_keepout(port_keepout))
    return design, draw_regions(design, chip, rules)


def region_results(spec, layout: Layout, solution: Solution) -> list[dict[str, Any]]:
    """results.json ``regions``: per culture region its name, target and solved share of the
    flow, bed channel count, footprint [m] (along, across the flow: the one asked for, else
    None) and the drawn extent of its bed [m]. A design without ``[[regions]]`` is one region
    named ""."""
    from chipflow.layout.footprint import bed_extent

    net = solution.network
    region = net.regions()
    bed = net.role == "bed"
    q = np.abs(solution.flow)
    total = float(q[bed].sum())
    outlines = {cr.name: cr for cr in layout.culture_regions}
    if spec.regions:
        entries = [(r.name, r.flow_fraction) for r in spec.regions]
    else:
        entries = [("", 1.0)]
    out = []
    for name, target in entries:  # a handful of regions
        mine = bed & (region == name)
        cr = outlines.get(name)
        out.append(
            {
                "name": name,
                "flow_fraction_target": target,
                "flow_fraction": float(q[mine].sum()) / total if total > 0 else None,
                "bed_channels": int(mine.sum()),
                "footprint": None if cr is None or not cr.asked else list(cr.footprint),
                "bed_extent": list(bed_extent(layout, name)),
            }
        )
    return out


def nominal_tree(source: DesignSource) -> tuple[TreeDesign, Solution, dict[str, Any]]:
    """A tree sized and solved with its nominal lengths: no drawing, supply or tubing.

    For a tree that cannot be drawn (round tubes, a comparison with Murray's law). The levels
    are checked as a build checks them (cells' window, design targets, bed residence time
    and oxygen), so the tables show the checks' verdicts.

    Returns
    -------
    design : TreeDesign
    solution : Solution
        The nominal tree fed with the design flow.
    results : dict
        As :attr:`Build.results`, without drawing, field or operation.
    """
    from chipflow.design.tree_network import solve_tree

    top = source.top
    spec = load_tree_spec(top)
    culture = read_culture(top)
    design = size_tree(spec)
    solution = solve_tree(design)
    generations = level_rows(solution)
    targets = _targets_window(spec)
    transport = run_transport(solution, culture, read_transport(top))
    checks = (
        *culture_checks(
            solution,
            generations,
            culture,
            culture.window,
            culture.residence_time or spec.bed.residence_time,
            targets=targets,
            target_kind=spec.targets.kind,
            target_levels=spec.targets.levels,
        ),
        *transport_checks(transport),
    )
    supply = {"mode": "the design flow into the trunk (nominal tree: no supply or tubing)"}
    results = _results(
        source,
        spec.name,
        spec.description,
        spec.fluid,
        supply,
        solution,
        generations,
        checks,
        culture.window or targets,
    )
    results["warnings"] = list(design.warnings)
    results["transport"] = transport.results
    return design, solution, results


def _field(
    layout: Layout,
    solution: Solution,
    viscosity: float,
    window: ShearWindow | None,
    seeded: str,
    flow_driven: bool | None,
    run: bool | None,
    progress: Progress,
    warnings: list[str],
    allow_large: bool = False,
):
    """The field solve of a drawing: when asked for, or by default when it is estimated to fit
    the budget (:func:`chipflow.field.budget.field_by_default`); None when not solved. A mesh
    that comes out larger than estimated leaves a default field out with a line in
    ``warnings``; an asked-for field is solved when its estimate fits the memory this process
    may use (:func:`chipflow.resources.check_memory`; ``allow_large`` lifts the guard)."""
    from chipflow.field.budget import field_estimate
    from chipflow.field.chip import estimate_triangles
    from chipflow.resources import check_memory, fits_memory, size_text, time_text

    limit = None
    if run is None:
        from chipflow.field.budget import field_by_default, max_triangles

        run = field_by_default(layout)
        limit = max_triangles()  # the mesh may come out larger than estimated
    if not run:
        return None
    from chipflow.errors import MeshBudgetError
    from chipflow.field.run import run_field as solve_chip_field

    estimate = field_estimate(estimate_triangles(layout), "the field solve of the drawing")
    if limit is None and not allow_large and not fits_memory(estimate):
        # asked for, but the whole chip would not fit: composed from its pieces instead
        from chipflow.errors import FieldError
        from chipflow.field.run import run_composed_field

        progress("field, composed from its pieces")
        warnings.append(
            f"field composed from its pieces: the whole chip's ({estimate.detail}) would need "
            f"about {size_text(estimate.memory)}, more than this process may use; pass "
            "--allow-large to solve it whole"
        )
        try:
            return run_composed_field(layout, solution, viscosity, window, flow_driven)
        except FieldError as exc:  # the field is an addition: the build stands without it
            warnings.append(f"field not composed: {exc}")
            return None
    estimate = check_memory(estimate, allow_large=allow_large, advice="build without --field")
    progress(f"field ({estimate.detail}, about {time_text(estimate.seconds)})")
    try:
        return solve_chip_field(
            layout, solution, viscosity, window, seeded, flow_driven=flow_driven,
            max_triangles=limit,
        )  # fmt: skip
    except MeshBudgetError as exc:  # only when not asked for: then it is left out
        warnings.append(f"field not solved by default: {exc}; ask with --field")
        return None


def _composed_apart(field_run, results: dict):
    """Put a field in ``results``: a whole chip's as ``field``, a composed one as
    ``composed_field`` (the other None); returns the whole chip's run, or None."""
    from chipflow.field.run import ComposedRun

    composed = isinstance(field_run, ComposedRun)
    results["composed_field"] = field_run.results if composed else None
    whole = None if composed else field_run
    results["field"] = None if whole is None else whole.results
    return whole


def _field_outcome(field_run, checks, transport, results, layout, culture, window, progress):
    """What the field adds to a build: the oxygen map, and the share of the seeded floor
    outside the shear window as a check (so the verdict counts it); the checks and status in
    ``results`` follow."""
    if field_run is None:
        return checks, transport
    transport = _field_transport(transport, field_run, layout, culture, progress)
    if window is not None:
        checks = (
            *checks,
            check_floor_outside(
                field_run.results["area_outside_window"],
                window,
                culture.outside_window_limit,
                by_zone=field_run.results["outside_by_zone"],
                source=culture.outside_window_source,
            ),
        )
        results["checks"] = [c.to_dict() for c in checks]
        results["status"] = worst_status(checks)
    return checks, transport


def _field_transport(transport, field_run, layout, culture, progress: Progress):
    """The oxygen map on the field mesh, where there is something to map (cells, or oxygen
    through the roof)."""
    if not (transport.cells or transport.results["roof_conductance"] > 0):
        return transport
    from chipflow.transport.field import with_field

    progress("oxygen field")
    return with_field(transport, field_run.solution, layout, culture.seeded)


def _targets_window(spec) -> ShearWindow | None:
    """The ``[targets]`` window, one-sided when only one bound is given (None when the
    targets are the ``[culture]`` cell type's window, checked as such, or give no bound)."""
    t = spec.targets
    if t.cell is not None or (t.minimum is None and t.maximum is None):
        return None
    source = f"design file {Path(spec.source).name} [targets]"
    low = 0.0 if t.minimum is None else t.minimum
    high = math.inf if t.maximum is None else t.maximum
    return ShearWindow("design targets", low, high, source)


# -- explicit networks ---------------------------------------------------------------------------
def _build_network(
    source: DesignSource,
    progress: Progress,
    run_field: bool | None = None,
    allow_large: bool = False,
) -> Build:
    from chipflow.layout import LayoutRules
    from chipflow.spec.tree import read_fabrication

    top = source.top
    design = load_network_design(top)
    culture, limits = read_culture(top), read_limits(top)
    transport_spec = read_transport(top)
    rules = LayoutRules.from_fabrication(read_fabrication(top))
    read_tolerances(top)  # used by chipflow vary; checked here so that a typo fails early
    layout = export = None
    network = design.network
    if design.drawing is not None:
        from chipflow.layout import check_rules
        from chipflow.layout.engine import draw_sketch
        from chipflow.layout.extract import unsolved_junctions
        from chipflow.layout.routes import network_sketch
        from chipflow.spec.chip import read_chip

        chip, port_keepout = read_chip(top)
        if port_keepout is not None:
            rules = replace(rules, port_keepout=port_keepout)
        export = read_export(top, design_hash=f"sha256:{source.sha256[:16]}")
        progress("layout")
        layout = draw_sketch(network_sketch(design.drawing, design.name, chip, rules))
        progress("extract")
        network = drawn_network(design, layout)
        findings = check_rules(layout, rules)
        warnings = [*layout.warnings, *unsolved_junctions(layout)]
        chambers = [
            (c.name, c.key, [layout.node_names[n] for n in c.port_nodes]) for c in layout.chambers
        ]
    else:
        if run_field:
            raise SpecError(
                f"{source.path}: --field solves the flow on the drawing, and this network is "
                f"{design.undrawn}"
            )
        from chipflow.layout.check import chamber_findings, size_findings
        from chipflow.layout.extract import with_chambers

        rect = ~network.round
        names = np.asarray(network.channel_names(), dtype=str)
        labels = np.char.add(np.char.add("channel '", names), "'")
        findings = size_findings(
            network.width[rect], network.depth[rect], labels[rect], names[rect], rules
        )
        warnings = [design.undrawn] if design.undrawn else []
        chambers = _undrawn_chambers(design, rules)
        for name, key, _ in chambers:  # a handful of chambers: their shape's rules
            findings += chamber_findings(name, key, rules)
        progress("chambers")
        network = with_chambers(network, chambers)
    progress("solve")
    soft = solve_operating_point(
        design.operation.walls, network, design.fluid, design.pressures, design.flows
    )
    solution = soft.solution
    progress("transport")
    transport = run_transport(solution, culture, transport_spec)
    progress("check")
    generations = level_rows(solution)
    runs = _chamber_runs(chambers, soft.rigid, culture.window, progress)
    operation = operate(
        design.operation,
        solution,
        generations,
        culture.window,
        culture.seeded,
        limits=limits,
        soft=soft,
    )
    checks = (
        *culture_checks(
            solution,
            generations,
            culture,
            culture.window,
            culture.residence_time,
            oscillating=operation.oscillating,
        ),
        *_chamber_checks(runs, culture),
        *transport_checks(transport),
        *pressure_checks(solution, limits),
        *operation.checks,
        *fabrication_results(findings),
    )
    supply = {
        "mode": "; ".join(f"{node}: {_supply_words(s)}" for node, s in design.supplies.items()),
        "ports": {
            node: {"mode": s.label or s.kind, "head" if s.kind == "reservoir" else s.kind: s.value}
            for node, s in design.supplies.items()
        },
    }
    results = _results(
        source,
        design.name,
        design.description,
        design.fluid,
        supply,
        solution,
        generations,
        checks,
        culture.window,
    )
    attach(results, operation)
    results["channels"] = channel_rows(solution)
    if layout is not None:  # each drawn channel's width on the mask (tubing: none)
        mask = layout.channels.mask_width
        for i, row in enumerate(results["channels"]):  # a network written by hand
            row["mask_width"] = float(mask[i]) if i < mask.size else None
    results["fabrication"] = None if layout is None else _fabrication_dict(layout, export, findings)
    results["chambers"] = _chamber_dicts(runs, culture.window)
    results["ports"] = [] if layout is None else mask_ports(layout, export.dxf.mirror)
    results["warnings"] = warnings
    field_run = (
        None
        if layout is None
        else _field(
            layout,
            soft.rigid,
            design.fluid.viscosity,
            culture.window,
            culture.seeded,
            None,
            run_field,
            progress,
            warnings,
            allow_large,
        )
    )
    field_run = _composed_apart(field_run, results)
    checks, transport = _field_outcome(
        field_run, checks, transport, results, layout, culture, culture.window, progress
    )
    results["transport"] = transport.results
    return Build(
        source,
        design.name,
        design.description,
        design.fluid,
        None,
        layout,
        solution,
        tuple(checks),
        export,
        results,
        field_run,
        operation=operation,
        transport=transport,
        chambers=tuple(runs),
    )


def _undrawn_chambers(design, rules) -> list:
    """The chambers of an explicit network that is not drawn: each key with its two channels
    meeting it on its axis (name, key, nodes)."""
    from chipflow.layout.chamber import undrawn_key

    net = design.network
    out = []
    for c in design.chambers:  # a handful of chambers
        ends = []
        for node in (c.a, c.b):
            i = net.node_index(node)
            k = int(np.flatnonzero(((net.node_a == i) | (net.node_b == i)) & ~net.round)[0])
            ends.append((float(net.width[k]), float(net.depth[k])))
        key = undrawn_key(c.shape, ends[0], ends[1], rules.grid, rules.alignment_margin)
        out.append((c.name, key, [c.a, c.b]))
    return out


def _chamber_runs(chambers, solution, window, progress: Progress) -> list:
    """Each chamber at the operating point (its floor shear from its 2D solve)."""
    if not chambers:
        return []
    from chipflow.field.chambers import chamber_runs

    progress("chambers")
    return chamber_runs(chambers, solution, window)


def _chamber_dicts(runs, window) -> list[dict[str, Any]]:
    if not runs:
        return []
    from chipflow.field.chambers import chamber_dict

    return [chamber_dict(r, window is not None) for r in runs]


def _chamber_checks(runs, culture) -> list[CheckResult]:
    """The share of each chamber's floor inside the cells' window (none without one)."""
    window = culture.window
    if window is None:
        return []
    from chipflow.checks.culture import check_chamber_floor

    return [
        check_chamber_floor(
            r.name,
            1.0 - r.stats.outside,
            r.stats.p05,
            r.stats.p50,
            r.stats.p95,
            window,
            culture.outside_window_limit,
            source=culture.outside_window_source,
        )
        for r in runs
    ]


def drawn_network(design, layout: Layout):
    """The network of a drawn explicit network: the drawing's channels (with their pieces'
    corrections) and the design's tubes, nodes named as in the file.

    Raises
    ------
    SpecError
        Where a channel's given ``length`` differs from its drawn length by more than
        :data:`~chipflow.spec.network.LENGTH_TOLERANCE`.
    """
    from chipflow.layout import extract_network
    from chipflow.network import Network
    from chipflow.spec.network import LENGTH_TOLERANCE

    drawn = layout.channels.length
    for i, route in enumerate(design.drawing.routes):  # the channels given with a length
        if route.length is None or abs(route.length - drawn[i]) <= LENGTH_TOLERANCE * drawn[i]:
            continue
        raise SpecError(
            f"{route.where}.length: channel {route.name!r} is given {route.length * 1e3:.4g} mm "
            f"long but drawn {drawn[i] * 1e3:.4g} mm long through its nodes and corners (more "
            f"than {LENGTH_TOLERANCE:.0%} apart); leave length out, or move its corners"
        )
    chip = extract_network(layout)
    given = design.network
    tubes = np.flatnonzero(given.round)
    names = list(chip.node_names)
    names += [n for n in given.node_names if n not in names]
    index = {n: i for i, n in enumerate(names)}
    remap = np.array([index[n] for n in given.node_names])
    channel_names = [*chip.channel_names(), *(given.channel_name(int(t)) for t in tubes)]
    return Network.from_arrays(
        np.concatenate([chip.node_a, remap[given.node_a[tubes]]]),
        np.concatenate([chip.node_b, remap[given.node_b[tubes]]]),
        np.concatenate([chip.width, given.width[tubes]]),
        np.concatenate([chip.depth, given.depth[tubes]]),
        np.concatenate([chip.length, given.length[tubes]]),
        round=np.concatenate([chip.round, given.round[tubes]]),
        names=channel_names,
        generation=np.concatenate([chip.generation, given.generation[tubes]]),
        role=np.concatenate([chip.role, given.role[tubes]]),
        node_names=names,
    )


# -- results ---------------------------------------------------------------------------------------
def _supply_dict(supply: SupplySpec) -> dict[str, Any]:
    """The supply as results: a one-line ``mode`` for people and the values in SI."""

    def one(s: Supply) -> dict[str, Any]:
        key = {"flow": "flow", "pressure": "pressure", "reservoir": "head"}[s.kind]
        return {"mode": s.label, key: s.value}

    inlet, outlet = one(supply.inlet), one(supply.outlet)
    words = [_supply_words(supply.inlet)]
    for side, length in (("inlet", supply.inlet_tubing), ("outlet", supply.outlet_tubing)):
        if length > 0:
            words.append(
                f"{length * 100:.3g} cm of {supply.tubing_diameter * 1e3:.3g} mm tubing at the "
                f"{side}"
            )
    words.append(f"outlet {_supply_words(supply.outlet)}")
    return {
        "mode": "; ".join(words),
        "inlet": inlet,
        "outlet": outlet,
        "tubing_diameter": supply.tubing_diameter,
        "inlet_tubing": supply.inlet_tubing,
        "outlet_tubing": supply.outlet_tubing,
    }


def _supply_words(s: Supply) -> str:
    """A supply in lab units, e.g. "syringe pump, 12 uL/min"."""
    if s.kind == "flow":
        return f"{s.label}, {s.value * 6e10:.4g} uL/min"
    if s.kind == "pressure":
        return s.label if s.value == 0 else f"{s.label}, {s.value:.4g} Pa"
    return f"{s.label}, liquid {s.value * 100:.3g} cm above the port"


def _results(
    source: DesignSource,
    name: str,
    description: str,
    fluid: Fluid,
    supply: dict[str, Any],
    solution: Solution,
    rows: list[dict[str, Any]],
    checks: tuple[CheckResult, ...] | list[CheckResult],
    window: ShearWindow | None,
) -> dict[str, Any]:
    net = solution.network
    p_in, p_out = port_pressure_range(solution)
    port_flows = np.array(list(solution.port_flow.values()), dtype=float)
    total_flow = float(port_flows[port_flows > 0].sum())
    # transit along one path through the chip (the sum of level residence times), and the
    # time the liquid spends in the supply tubing on top of that
    transit = sum(r["residence_time"] for r in rows)
    tubing_transit = float(np.sum(solution.residence_time[net.role == "tubing"]))
    chip_inlet = next(
        (float(solution.pressure[i]) for i, n in enumerate(net.node_names) if n == "inlet"), p_in
    )
    return {
        "design": {
            "name": name,
            "description": description,
            "file": Path(source.path).name,
            "sha256": source.sha256,
        },
        "fluid": {
            "name": fluid.name,
            "viscosity": fluid.viscosity,
            "density": fluid.density,
            "temperature": fluid.temperature,
        },
        "supply": supply,
        "totals": {
            "inlet_pressure": p_in,
            "chip_inlet_pressure": chip_inlet,
            "outlet_pressure": p_out,
            "total_flow": total_flow,
            "total_resistance": (p_in - p_out) / total_flow if total_flow > 0 else None,
            "transit_time": transit if rows else None,
            "tubing_transit_time": tubing_transit,
            **_residual_dict(solution),
        },
        "generations": rows,
        "checks": [c.to_dict() for c in checks],
        "status": worst_status(checks),
        "shear_window": None if window is None else window.to_dict(),
        "units": RESULT_UNITS,
    }


def _residual_dict(solution: Solution) -> dict[str, float]:
    """The solve's self-check (:mod:`chipflow.network.residual`): ``mass_residual``,
    ``law_residual``, ``condition`` and ``residual_tolerance``, all plain numbers."""
    if solution.check is None:
        return {"mass_residual": float(solution.residual)}
    return {k: float(v) for k, v in solution.check.to_dict().items()}


def mask_ports(layout: Layout, mirror: bool) -> list[dict[str, Any]]:
    """Each punched port's name, centre and diameter [m] in the mask files' coordinates.

    The centres are snapped to the mask grid and mirrored with the mask (about the middle of
    the chip outline), as the DXF and GDSII files place them, so they can be given to
    ``chipflow analyse`` as ``--inlet`` and ``--outlet`` (in mm: multiply by 1000).
    """
    grid = layout.grid
    x0, _, x1, _ = layout.outline.bounds
    axis = (round(x0 / grid) + round(x1 / grid)) * grid
    rows = []
    for port in layout.ports:  # a handful of ports
        x, y = round(port.x / grid) * grid, round(port.y / grid) * grid
        rows.append(
            {
                "name": port.name,
                "x": float(axis - x if mirror else x),
                "y": float(y),
                "diameter": float(port.diameter),
            }
        )
    return rows


def _fabrication_dict(layout: Layout, export: ExportSettings, findings) -> dict[str, Any]:
    dxf = export.dxf
    return {
        "units": dxf.units,
        "polarity": dxf.polarity,
        "mirror": dxf.mirror,
        "holes": dxf.holes,
        "dxf_version": dxf.version,
        "gds_vertex_limit": export.gds.vertex_limit,
        "grid": layout.grid,
        "chip": {
            "width": float(layout.outline.bounds[2] - layout.outline.bounds[0]),
            "height": float(layout.outline.bounds[3] - layout.outline.bounds[1]),
            "margin": layout.margin,
        },
        "layers": [{"name": layer.name, "depth": layer.depth} for layer in layout.layers],
        # width of every drawn channel on the mask polygons, in the order of channels.csv
        "mask_width": [float(w) for w in layout.channels.mask_width],
        "findings": [_finding_dict(f) for f in findings],
    }


def _finding_dict(finding) -> dict[str, Any]:
    return {
        "rule": finding.rule,
        "severity": finding.severity,
        "value": finding.value,
        "limit": finding.limit,
        "x": finding.x,
        "y": finding.y,
        "channels": [int(c) for c in finding.channels],
        "message": finding.message,
    }
