"""The map benchmark script: its map file is a valid PGM and it prints its table."""

from __future__ import annotations

import cv2
import numpy as np

from veer.maps import FREE, OCCUPIED, UNKNOWN, load_map
from veer.tools import bench_maps


def test_bench_map_file_reads_back(tmp_path):
    shades = bench_maps.build_map(120, seed=3)
    assert set(np.unique(shades)) <= {bench_maps.FLOOR, bench_maps.OBSTACLE, bench_maps.UNKNOWN_SHADE}
    path = bench_maps.write_map(tmp_path, shades, 0.05)
    # source: OpenCV imread (an independent PGM reader)
    np.testing.assert_array_equal(cv2.imread(str(path), cv2.IMREAD_UNCHANGED), shades)
    grid = load_map(path)
    expected = np.select([shades == bench_maps.OBSTACLE, shades == bench_maps.UNKNOWN_SHADE], [OCCUPIED, UNKNOWN], FREE)
    np.testing.assert_array_equal(grid.classes, expected)
    assert grid.cell_size_m == 0.05


def test_bench_prints_its_table(capsys):
    assert bench_maps.main(["--size", "150", "--repeat", "1"]) == 0
    out = capsys.readouterr().out
    assert "map 150 x 150 = 22,500 cells" in out
    for step in ("load_map", "clearance_field_m", "inflate (clearance + threshold)", "ru_maxrss"):
        assert step in out
