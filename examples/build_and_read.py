"""Build the demo design into a folder and read its results back, as an analysis script would.

Writes the mask files, previews, report, results.json and channels.csv into a temporary
folder, then reads results.json and channels.csv with the standard library.
"""

import csv
import json
import tempfile
from pathlib import Path

from chipflow.export.bundle import build_to_folder

DESIGN = Path(__file__).resolve().parents[1] / "designs" / "demo_endothelial_bed.toml"


def main() -> None:
    with tempfile.TemporaryDirectory() as folder:
        build, files = build_to_folder(DESIGN, Path(folder) / "demo")
        print("wrote", ", ".join(f.name for f in files))
        results = json.loads((Path(folder) / "demo" / "results.json").read_text())
        for g in results["generations"]:
            print(
                f"{g['role']:>12} {g['generation']:>2}: {g['count']:>3} x "
                f"{g['width'] * 1e6:5.0f} um, floor shear {g['wall_shear_floor']:.3f} Pa"
            )
        with open(Path(folder) / "demo" / "channels.csv", newline="") as handle:
            rows = list(csv.DictReader(handle))
        bed = [float(r["flow [m^3/s]"]) for r in rows if r["role"] == "bed"]
        print(f"{len(bed)} bed channels, flow spread {max(bed) / min(bed) - 1:.2e}")
        print("overall:", results["status"])


if __name__ == "__main__":
    main()
