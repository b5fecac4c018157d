"""Write the example board outline geometry/boards/example-outline.dxf.

The board is a scenario of our own invention: a 100 mm x 70 mm board whose top-right corner is
rounded with a 10 mm radius (one bulged LWPOLYLINE segment), two M3 mounting holes (CIRCLE,
3.2 mm diameter) and a 20 mm x 10 mm rectangular cut-out (closed LWPOLYLINE). The geometry is on
layer "OUTLINE", a layer name of our own; a note on layer "NOTES" is annotation and is skipped by
the outline reader. Readers take the geometry of every layer unless told one layer.

Usage: python scripts/make_example_dxf.py [OUTPUT.dxf]
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path
from typing import Any

from ezdxf.filemanagement import new as new_drawing

OUTLINE_LAYER = "OUTLINE"
WIDTH_MM = 100.0
HEIGHT_MM = 70.0
CORNER_RADIUS_MM = 10.0
HOLE_DIAMETER_MM = 3.2  # M3 clearance, ISO 273 fine series (recalled from memory)
HOLE_CENTERS_MM = ((5.0, 5.0), (5.0, 65.0))
CUTOUT_MM = ((40.0, 30.0), (60.0, 40.0))  # lower-left and upper-right corners

ROOT = Path(__file__).resolve().parent.parent
DEFAULT_OUTPUT = ROOT / "geometry" / "boards" / "example-outline.dxf"


def build_example_outline() -> Any:
    """Return the example drawing as an ezdxf document (DXF R2010, units mm)."""
    doc = new_drawing("R2010")
    doc.header["$INSUNITS"] = 4  # millimetres
    doc.header["$MEASUREMENT"] = 1  # metric
    doc.layers.add(OUTLINE_LAYER, color=7)
    doc.layers.add("NOTES", color=3)
    msp = doc.modelspace()
    r = CORNER_RADIUS_MM
    # A bulge is tan(theta / 4) for an arc of included angle theta, positive counter-clockwise
    # (DXF reference, LWPOLYLINE group code 42); the 90-degree corner arc has tan(22.5 deg).
    corner_bulge = math.tan(math.radians(90.0) / 4.0)
    outline = [
        (0.0, 0.0, 0.0),
        (WIDTH_MM, 0.0, 0.0),
        (WIDTH_MM, HEIGHT_MM - r, corner_bulge),
        (WIDTH_MM - r, HEIGHT_MM, 0.0),
        (0.0, HEIGHT_MM, 0.0),
    ]
    msp.add_lwpolyline(outline, format="xyb", close=True, dxfattribs={"layer": OUTLINE_LAYER})
    for center in HOLE_CENTERS_MM:
        msp.add_circle(center, HOLE_DIAMETER_MM / 2.0, dxfattribs={"layer": OUTLINE_LAYER})
    (x0, y0), (x1, y1) = CUTOUT_MM
    msp.add_lwpolyline(
        [(x0, y0), (x1, y0), (x1, y1), (x0, y1)], close=True, dxfattribs={"layer": OUTLINE_LAYER}
    )
    msp.add_text(
        "boardheat example outline - a scenario of our own invention",
        height=2.0,
        dxfattribs={"layer": "NOTES", "insert": (0.0, -6.0)},
    )
    return doc


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("output", nargs="?", type=Path, default=DEFAULT_OUTPUT)
    args = parser.parse_args()
    build_example_outline().saveas(args.output)
    print(f"wrote {args.output}")


if __name__ == "__main__":
    main()
