"""Meshing stage: the largest-angle measure and the sliver warning.

Triangles flatter than ``MAX_ANGLE_DEG`` break the maximum angle condition under which P1
gradients converge (Babuska & Aziz, SIAM J. Numer. Anal. 13 (1976) 214-226). They appear where
two region outlines touch, and the run must say where.
"""

from __future__ import annotations

import math
import re
import warnings

import numpy as np
import pytest

from boardheat.errors import MeshWarning
from boardheat.meshing import MAX_ANGLE_DEG, build_mesh, largest_angles
from boardheat.run import RunOptions, run_check
from tests.conftest import make_board, raw_board

pytestmark = pytest.mark.gmsh


def test_largest_angles_of_known_triangles():
    # Elementary geometry: equilateral 60 deg, right isosceles 90 deg, and an isosceles
    # triangle of base 2 and height h has the apex angle 2 atan(1 / h). Tolerance 1e-9 deg.
    h = 0.01
    points = np.array(
        [[0.0, 0.0], [1.0, 0.0], [0.5, math.sqrt(3) / 2], [0.0, 1.0], [-1.0, 0.0], [0.0, h]]
    )
    triangles = np.array([[0, 1, 2], [0, 1, 3], [4, 1, 5]])
    expected = [60.0, 90.0, math.degrees(2.0 * math.atan(1.0 / h))]
    assert largest_angles(points, triangles) == pytest.approx(expected, abs=1e-9)


def _ring_in_pour(diameter_mm: float):
    # a contact ring inscribed in (or nested inside) an 8 x 8 mm pour: tangent at four points
    # when the diameter equals the side
    raw = raw_board()
    raw["pour"] = [{"name": "P1", "layer": "bot", "rect": {"center_mm": [8, 8], "size_mm": [8, 8]}}]
    raw["mount"] = [
        {
            "name": "M1",
            "circle": {"center_mm": [8, 8], "diameter_mm": diameter_mm},
            "side": "bottom",
            "temperature_c": 40.0,
            "conductance_w_per_k": 1.0,
        }
    ]
    return make_board(raw)


def test_outlines_that_touch_warn_where_the_slivers_are():
    with pytest.warns(MeshWarning) as caught:
        mesh = build_mesh(_ring_in_pour(8.0))
    assert largest_angles(mesh.points, mesh.triangles).max() > MAX_ANGLE_DEG
    message = str(caught[0].message)
    assert "test.toml: mesh:" in message
    assert "mount:M1" in message
    assert "pour:P1" in message
    # the worst sliver sits at one of the four tangent points, (4|12, 8) or (8, 4|12) mm
    x, y = (float(v) for v in re.findall(r"[xy]=([\d.]+) mm", message))
    tangent = np.array([[4.0, 8.0], [12.0, 8.0], [8.0, 4.0], [8.0, 12.0]])
    assert np.hypot(*(tangent - [x, y]).T).min() < 1.0


def test_outlines_nested_with_a_margin_mesh_without_slivers():
    with warnings.catch_warnings():
        warnings.simplefilter("error", MeshWarning)
        mesh = build_mesh(_ring_in_pour(7.0))
    assert largest_angles(mesh.points, mesh.triangles).max() < MAX_ANGLE_DEG


def test_the_check_reports_the_sliver_warning():
    result = run_check(_ring_in_pour(8.0), RunOptions(steady=True))
    assert any("angle above" in w and "mount:M1" in w for w in result.warnings)
