"""Sweep the pump flow of the demo design and watch floor shear and inlet pressure.

Loads designs/demo_endothelial_bed.toml, changes [tree].flow, rebuilds in memory (no files) and
prints, for each flow, the bed's floor wall shear, the pressure the pump must give and whether
every check passes. The sizing re-sizes every generation for each flow, so the shear stays in
the window and the channels grow instead, until the trunk of the single 50 um mould level
would need a roof wider than the sag limit allows: then the design is refused with the reason
and what to change.
"""

import tomllib
from pathlib import Path

from chipflow.build import DesignSource, build_design
from chipflow.errors import DesignError

DESIGN = Path(__file__).resolve().parents[1] / "designs" / "demo_endothelial_bed.toml"


def main() -> None:
    data = tomllib.loads(DESIGN.read_text())
    print(
        f"{'flow [uL/min]':>14} {'bed width [um]':>15} {'bed shear [Pa]':>15} "
        f"{'pump [Pa]':>10}  checks"
    )
    for flow in (6, 12, 18):
        data["tree"]["flow"] = f"{flow} uL/min"
        try:
            build = build_design(DesignSource.from_dict(data, "sweep.toml"))
        except DesignError as exc:
            print(f"{flow:>14}  cannot be made: {exc}")
            continue
        bed = next(g for g in build.results["generations"] if g["role"] == "bed")
        pump = build.results["totals"]["inlet_pressure"]
        print(
            f"{flow:>14} {bed['width'] * 1e6:>15.0f} {bed['wall_shear_floor']:>15.3f} "
            f"{pump:>10.0f}  {build.status}"
        )


if __name__ == "__main__":
    main()
