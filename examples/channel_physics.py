"""How the wall shear of a 50 um deep channel depends on its width, from the duct physics.

Compares the exact series with the parallel-plate shortcut 6 mu Q / (w h^2), which
underestimates the peak wall shear of narrow channels, and shows the floor shear of tall
channels (width below depth), where cells on the floor feel less than the peak.
"""

import numpy as np

from chipflow.physics import duct
from chipflow.physics.fluid import culture_medium


def main() -> None:
    medium = culture_medium()  # 37 degC, 0.95 mPa s (from memory; use a measured value)
    depth, flow = 50e-6, 1e-9 / 60  # 50 um deep, 1 uL/min
    widths = np.array([25, 50, 100, 200, 400, 800]) * 1e-6
    state = duct.flow_state(widths, depth, 1e-3, flow, medium.viscosity, medium.density)
    plates = 6 * medium.viscosity * flow / (widths * depth**2)
    print(f"{'width [um]':>10} {'floor [Pa]':>11} {'peak [Pa]':>10} {'plates [Pa]':>12}")
    rows = zip(widths, state.wall_shear_floor, state.wall_shear_max, plates, strict=True)
    for w, floor, peak, p in rows:
        print(f"{w * 1e6:>10.0f} {floor:>11.4f} {peak:>10.4f} {p:>12.4f}")


if __name__ == "__main__":
    main()
