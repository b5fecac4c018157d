"""Re-pin the demo boards' expected results (run on purpose; say why in the commit).

Usage: python scripts/pin_demos.py [demo_boards/NAME ...]
Writes demo_boards/NAME/expected.json: peak junction temperature per refdes (degC), status,
verdict and the board statistics the run reports, for tests/test_demos.py.
"""

from __future__ import annotations

import json
import os
import sys
import tempfile
from pathlib import Path

from boardheat.board import load_board
from boardheat.run import RunOptions, run_check

ROOT = Path(__file__).resolve().parents[1]


def expected_for(board_path: Path) -> dict[str, object]:
    result = run_check(load_board(board_path), RunOptions())
    return {
        "board": result.board_name,
        "verdict": result.verdict,
        "tj_peak_c": {p.refdes: p.tj_peak - 273.15 for p in result.parts},
        "status": {p.refdes: p.status for p in result.parts},
        "laminate_peak_c": result.laminate.peak - 273.15,
        "dofs": result.stats["dofs"],
        "sanity_failed": [c.name for c in result.sanity if not c.passed],
    }


def main(args: list[str]) -> None:
    demos = [Path(a) for a in args] or sorted(
        p.parent for p in ROOT.glob("demo_boards/*/board.toml")
    )
    for demo in demos:
        data = expected_for(demo / "board.toml")
        fd, tmp = tempfile.mkstemp(dir=demo, suffix=".tmp")
        with os.fdopen(fd, "w") as fh:
            json.dump(data, fh, indent=2, sort_keys=True)
            fh.write("\n")
        os.replace(tmp, demo / "expected.json")
        print(f"{demo.name}: {data['verdict']}, {data['tj_peak_c']}")


if __name__ == "__main__":
    main(sys.argv[1:])
