"""How fast must a peristaltic pump turn for its pulse to fade before the cells?

Builds the bundled pulsatile design once, then re-solves only its time-varying operation for
a range of pump speeds (3 rollers; the pulse frequency is rpm / 60 x rollers) and prints the
bed's floor-shear pulsation and the share of each pulse it spends in the endothelial window.
The tubing's compliance and the chip's resistance form a low-pass filter: the faster the
pump, the smaller the pulse that reaches the bed.
"""

from dataclasses import replace
from pathlib import Path

from chipflow.build import build_design
from chipflow.operation import Pulsatile, Waveform, operate
from chipflow.spec.culture import read_culture

DESIGN = Path(__file__).resolve().parents[1] / "designs" / "pulsatile_peristaltic_bed.toml"


def main() -> None:
    build = build_design(DESIGN)
    spec = build.operation.spec
    pump_node, pump = next(iter(spec.pulsatile.items()))
    mean, pulsation = pump.waveform.mean, pump.waveform.pulsation
    rows = build.results["generations"]
    window = read_culture(build.source.top).window
    print(f"pump pulsation {pulsation:.0%} of the mean; window {window.text}")
    print("  rpm  pulse [Hz]  bed pulsation  bed time in window")
    seen = []
    for rpm in (2, 5, 10, 20, 40, 80):
        frequency = rpm / 60 * 3
        wave = Waveform.sinusoid(mean, pulsation * mean, frequency)
        swept = replace(spec, pulsatile={pump_node: Pulsatile("flow", wave, pump.label)})
        result = operate(swept, build.solution, rows, window, "all")
        bed = next(lv for lv in result.results["levels"] if lv["label"] == "bed")
        seen.append(bed["pulsation"])
        print(
            f"{rpm:5d}  {frequency:10.2f}  {bed['pulsation']:13.1%}  {bed['time_in_window']:18.0%}"
        )
    if all(a > b for a, b in zip(seen, seen[1:], strict=False)):
        print("faster pumps damp the pulse at the bed")


if __name__ == "__main__":
    main()
