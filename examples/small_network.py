"""Build a small channel network in code, drive it from a gravity reservoir, and solve it.

A reservoir 5 cm above the inlet feeds a trunk that splits into two culture channels of
different widths; the outlet is open to the air. Prints the flow and floor shear per channel.
"""

from chipflow.network import NetworkBuilder, boundary_conditions, reservoir, solve
from chipflow.network.supply import atmosphere
from chipflow.physics.fluid import culture_medium


def main() -> None:
    net = NetworkBuilder()
    net.tube("feed", "reservoir", "inlet", diameter=0.5e-3, length=0.2)
    net.channel("trunk", "inlet", "split", width=300e-6, depth=50e-6, length=5e-3)
    net.channel("wide", "split", "join", width=400e-6, depth=50e-6, length=8e-3)
    net.channel("narrow", "split", "join", width=100e-6, depth=50e-6, length=8e-3)
    net.channel("exit", "join", "outlet", width=300e-6, depth=50e-6, length=5e-3)
    network = net.build()
    medium = culture_medium()
    pressures, flows = boundary_conditions(
        {"reservoir": reservoir(0.05), "outlet": atmosphere()}, medium
    )
    solution = solve(network, medium, pressures, flows)
    rows = zip(network.channel_names(), solution.flow, solution.wall_shear_floor, strict=True)
    for name, q, tau in rows:
        print(f"{name:>8}: {q * 6e10:8.3f} uL/min, floor shear {tau:.3f} Pa")
    print(f"reservoir pressure {solution.pressure[network.node_index('reservoir')]:.0f} Pa")


if __name__ == "__main__":
    main()
