"""Draw the README's picture: the profile figure of the bundled demo design, as a PNG.

Run from the repository root after a change to the demo design or to the profile figure:

    python docs/readme_figure.py

tests/test_guide.py draws it again and compares it with the committed file, so the picture
cannot go stale unnoticed.
"""

from __future__ import annotations

import sys
from pathlib import Path

FIGURE = Path(__file__).resolve().parent / "_static" / "demo-profile.png"
#: Resolution of the picture [dots per inch]: sharp on a screen, small in the repository.
DPI = 110


def draw(path: Path = FIGURE) -> Path:
    """Build the demo design (no files) and write its profile figure to ``path``."""
    from chipflow.build import build_design
    from chipflow.report.figures import profile_figure
    from chipflow.spec.bundled import resolve_design

    results = build_design(resolve_design("demo_endothelial_bed"), field=False).results
    figure = profile_figure(results)
    path.parent.mkdir(parents=True, exist_ok=True)
    figure.savefig(path, format="png", dpi=DPI, metadata={"Software": None})
    return path


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    print(f"wrote {draw()}")
