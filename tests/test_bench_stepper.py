"""Smoke tests of scripts/bench_stepper.py: it runs on a coarse, short board and prints its table.

The benchmark's figures are timings, so nothing here checks a speed; only that every case runs,
that the table and the ratios are printed, and that the JSON holds the same figures.
"""

import json
import subprocess
import sys
from pathlib import Path

import pytest

pytest.importorskip("gmsh")

ROOT = Path(__file__).resolve().parents[1]
SCRIPT = ROOT / "scripts" / "bench_stepper.py"
# a coarse mesh (mesh_refinement x 0.5, ~6.6 k DOFs) and the first 20 ms of the demo sequence:
# the buck's inrush pulse and soft-start ramps, i.e. a few breakpoints for every stepper
SMALL = ["--size", "0.5", "--duration", "0.02", "--threads", "1"]


def run_script(*args: str) -> str:
    cmd = [sys.executable, str(SCRIPT), *SMALL, *args]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=120, check=False)
    assert done.returncode == 0, done.stderr
    return done.stdout


@pytest.mark.gmsh
def test_every_case_prints_its_row_and_the_ratios(tmp_path: Path) -> None:
    out = tmp_path / "bench.json"
    text = run_script(
        "--in-process",
        "--cases",
        "trbdf2,reference,loose,be,be_constant,ivp",
        "--be-dt0",
        "0.005",
        "--be-budget",
        "2",
        "--ivp-budget",
        "5",
        "--json",
        str(out),
    )
    for key in ("steps", "factor", "solves", "wall s", "peak MiB", "|dTj| K"):
        assert key in text, f"column {key!r} missing from:\n{text}"
    rows = ("reference rtol 1e-06", "TR-BDF2 rtol", "backward Euler dt 0.005", "BE constant dt")
    for row in (*rows, "solve_ivp"):
        assert row in text, f"row {row!r} missing from:\n{text}"
    assert "steps BE / TR-BDF2, both within 0.1 K" in text
    assert "steps BE const dt / TR-BDF2, both within 0.1 K" in text
    assert "TR-BDF2 rtol 0.03" in text  # the loosest of the "loose" runs (board rtol 1e-3 x 30)
    assert "time solve_ivp / TR-BDF2" in text

    figures = json.loads(out.read_text())
    tr = figures["cases"]["trbdf2"]
    assert tr["steps"] > 0
    assert tr["solves"] >= 3 * tr["steps"]  # two stages and the error estimate per step
    assert tr["peak_mib"] > 0
    # the tight reference is the yardstick: the board-tolerance run agrees with it closely
    assert tr["error_vs_reference"] < 0.1
    be = figures["be_equal"][0]
    assert be["target"] == pytest.approx(0.1)
    assert be["steps"] >= figures["be_sweep"][0]["steps"]
    # the constant step: 0.02 s in equal steps of dt = 5 ms, 2.5 ms, ... and one factorization
    const = figures["be_constant_sweep"]
    assert [r["steps"] for r in const] == [4 * 2**i for i in range(len(const))]
    assert all(r["factorizations"] == 1 and r["solves"] == r["steps"] for r in const)
    # on this sequence its error does not rise as dt halves (measured 0.50, 0.50, 0.19, 0.03 K)
    errors = [r["error"] for r in const]
    assert errors == sorted(errors, reverse=True)
    # TR-BDF2 at equal accuracy: the quickest run within 0.1 K, never a run outside it
    loose = figures["tr_sweep"]
    assert [r["rtol"] for r in loose] == pytest.approx([3e-3, 1e-2, 3e-2])
    runs = [r for r in [tr, *loose] if r["error_vs_reference"] <= 0.1]
    quickest = min(runs, key=lambda r: r["seconds_wall"])
    assert f"quickest run that meets it is TR-BDF2 rtol {quickest['rtol']:g}" in text

    # a saved run prints the same table again
    cmd = [sys.executable, str(SCRIPT), "--show", str(out)]
    shown = subprocess.run(cmd, capture_output=True, text=True, timeout=60, check=True).stdout
    assert shown == text


@pytest.mark.gmsh
def test_case_runs_in_its_own_process() -> None:
    text = run_script("--only-trbdf2")
    assert "TR-BDF2 rtol" in text
    assert "stepper overhead wall/(factor+solve)" in text
    assert "peak MiB" in text
