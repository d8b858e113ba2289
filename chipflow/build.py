"""The whole job in one call: design file -> sizing -> drawing -> network -> solution -> checks.

:func:`build_design` runs every stage on a design file and returns a :class:`Build`: the sized
design, the drawn layout, the solved network, the checks and the results (a JSON-able dict of
SI values). Writing the files is :func:`chipflow.export.bundle.write_build`'s job; nothing here
writes anything.

Two kinds of design file build:

- **tree designs** (a ``[tree]`` table) are sized, drawn on the chip, extracted back into a
  network from the drawing (so the solver sees exactly the geometry of the mask), connected to
  their supply and tubing, solved and checked;
- **explicit networks** (``[[channels]]``/``[[tubes]]``) are solved and checked as given; they
  have no drawing, so no mask files.

Stages report their name to an optional ``progress`` callable, for the command line.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from chipflow.checks import CheckResult, fabrication_results, worst_status
from chipflow.checks.cell_types import ShearWindow
from chipflow.checks.suite import bed_grader, culture_checks, pressure_checks
from chipflow.design.model import TreeDesign
from chipflow.design.sizing import size_tree
from chipflow.errors import ChipflowError, SpecError
from chipflow.layout.model import Layout
from chipflow.network import Solution, solve
from chipflow.network.summary import channel_rows, level_rows, port_pressure_range
from chipflow.network.supply import Supply, boundary_conditions, with_tubing
from chipflow.operation import Operation, operate, steady_boundary
from chipflow.operation.run import attach
from chipflow.physics.fluid import Fluid
from chipflow.spec.culture import read_culture, read_limits
from chipflow.spec.export import ExportSettings, read_export
from chipflow.spec.network import is_network_design, load_network_design
from chipflow.spec.operation import read_tree_operation
from chipflow.spec.reader import Table, parse_design_text
from chipflow.spec.supply import AUTO_PRESSURE_LABEL, SupplySpec, read_supply
from chipflow.spec.tolerances import read_tolerances
from chipflow.spec.tree import load_tree_spec
from chipflow.units import RESULT_UNITS

__all__ = ["Build", "DesignSource", "read_design_source", "build_design", "RESULT_UNITS"]

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


def read_design_source(path: str | Path) -> DesignSource:
    """Read and parse a design file, keeping the hash of its exact bytes."""
    from chipflow.spec.reader import read_design_bytes

    raw = read_design_bytes(path)
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
    design : TreeDesign or None
        The sized tree (None for an explicit network).
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
    """

    source: DesignSource
    name: str
    description: str
    fluid: Fluid
    design: TreeDesign | None
    layout: Layout | None
    solution: Solution
    checks: tuple[CheckResult, ...]
    export: ExportSettings | None
    results: dict[str, Any] = dataclasses.field(repr=False)
    field: Any = dataclasses.field(default=None, repr=False)
    operation: Operation | None = dataclasses.field(default=None, repr=False)

    @property
    def status(self) -> str:
        """ "pass", "warn" or "fail": the worst of the checks."""
        return worst_status(self.checks)


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
        when the chip is small enough to solve in seconds
        (:data:`chipflow.field.chip.AUTO_TRIANGLES`). Explicit networks have no drawing and
        no field.

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
            return _build_network(source, progress)
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
    progress("size")
    grade = bed_grader(
        culture,
        spec.flow,
        2**spec.generations,
        spec.bed.residence_time,
        spec.bed.length,
    )
    design = size_tree(spec, bed_grade=grade)
    check_size(sum(level.count for level in design.levels), allow_large=allow_large)
    progress("layout")
    keepout = {} if port_keepout is None else {"port_keepout": port_keepout}
    rules = LayoutRules.from_fabrication(design.fabrication, **keepout)
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
    solution = solve(network, spec.fluid, pressures, flows)
    if supply.pressure_for_flow is not None:
        # The network is linear: the pressure at the feed under the design flow is the
        # pressure a controller must hold to give that flow. Solve again driven by it.
        held = Supply("pressure", solution.node_pressure(feed), AUTO_PRESSURE_LABEL)
        supply = replace(supply, inlet=held)
        pressures, flows = boundary_conditions({feed: held, drain: supply.outlet}, spec.fluid)
        solution = solve(network, spec.fluid, pressures, flows)
    progress("check")
    findings = check_rules(layout, rules)
    targets = _targets_window(spec)
    window = culture.window or targets
    generations = level_rows(solution)
    residence_target = culture.residence_time or spec.bed.residence_time
    operation = operate(timing, solution, generations, window, culture.seeded, feed, drain, limits)
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
        ),
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
    results["fabrication"] = _fabrication_dict(layout, export, findings)
    results["warnings"] = [*design.warnings, *layout.warnings, *unsolved_junctions(layout)]
    field_run = None
    from chipflow.field.chip import AUTO_TRIANGLES, estimate_triangles

    triangles = estimate_triangles(layout)
    if run_field is None:
        run_field = triangles <= AUTO_TRIANGLES
    if run_field:
        from chipflow.field.budget import field_estimate
        from chipflow.field.run import run_field as solve_chip_field
        from chipflow.resources import check_memory, time_text

        estimate = check_memory(
            field_estimate(triangles, "the field solve of the drawing"),
            allow_large=allow_large,
            advice="build without --field",
        )
        progress(f"field ({estimate.detail}, about {time_text(estimate.seconds)})")
        field_run = solve_chip_field(
            layout,
            solution,
            spec.fluid.viscosity,
            window,
            culture.seeded,
            flow_driven=supply.inlet.kind == "flow",
        )
    results["field"] = None if field_run is None else field_run.results
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
    )


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
def _build_network(source: DesignSource, progress: Progress) -> Build:
    top = source.top
    design = load_network_design(top)
    culture, limits = read_culture(top), read_limits(top)
    progress("solve")
    solution = solve(design.network, design.fluid, design.pressures, design.flows)
    progress("check")
    generations = level_rows(solution)
    operation = operate(
        design.operation, solution, generations, culture.window, culture.seeded, limits=limits
    )
    checks = (
        *culture_checks(solution, generations, culture, culture.window, culture.residence_time),
        *pressure_checks(solution, limits),
        *operation.checks,
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
    results["fabrication"] = None
    results["warnings"] = []
    results["field"] = None
    return Build(
        source,
        design.name,
        design.description,
        design.fluid,
        None,
        None,
        solution,
        tuple(checks),
        None,
        results,
        operation=operation,
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
