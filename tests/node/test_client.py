"""The client's grid messages: arrays and image files become grids the node reads back unchanged."""

from __future__ import annotations

import cv2
import msgpack
import numpy as np
import pytest

from veer.node.client import grid_message
from veer.node.codec import decode_grid, decode_input


def read_back(message: dict):
    frames = [b"grid", msgpack.packb(message, use_bin_type=True)]
    return decode_grid(decode_input(frames, max_bytes=1 << 24, max_cells=1 << 24), 1 << 24).grid


@pytest.fixture
def classes():
    rng = np.random.default_rng(11)
    return rng.choice(np.array([0, 1, 2], np.uint8), size=(40, 60), p=[0.7, 0.2, 0.1])


@pytest.mark.parametrize("encoding", ["raw", "png", "pgm"])
def test_an_array_of_classes_comes_back_as_the_same_classes(classes, encoding):
    grid = read_back(grid_message(classes, map_id="a", cell_size_m=0.05, origin_m=(1.0, -2.0), encoding=encoding,
                                  classes=True))
    assert np.array_equal(grid.classes, classes)
    assert grid.cell_size_m == 0.05 and grid.origin_m == (1.0, -2.0)


def test_an_array_of_shades_is_sent_as_shades():
    shades = np.zeros((5, 7), np.uint8)  # all black: all occupied, never mistaken for classes
    assert read_back(grid_message(shades, map_id=1, cell_size_m=0.1)).classes.min() == 1


def test_an_image_file_is_sent_as_is_with_its_sidecar(tmp_path, classes):
    shades = np.where(classes == 1, 0, np.where(classes == 2, 150, 255)).astype(np.uint8)
    image = tmp_path / "yard.png"
    assert cv2.imwrite(str(image), shades)  # source: OpenCV's PNG writer (libpng)
    (tmp_path / "yard.toml").write_text("cell_size_m = 0.2\norigin_m = [3.0, 4.0]\n")
    message = grid_message(image, map_id="yard")
    assert message["encoding"] == "png" and message["cells"] == image.read_bytes()
    grid = read_back(message)
    assert np.array_equal(grid.classes, classes) and grid.cell_size_m == 0.2 and grid.origin_m == (3.0, 4.0)


def test_an_array_needs_a_cell_size(classes):
    with pytest.raises(ValueError, match="cell_size_m"):
        grid_message(classes, map_id=1, classes=True)
