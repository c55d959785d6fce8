"""PNG decoding against an independent encoder (zlib + struct, per the PNG 1.2 spec) and cv2.imencode."""

from __future__ import annotations

import struct
import zlib

import cv2
import numpy as np
import pytest

from veer.maps import MapFormatError, MapTooLargeError, read_image, read_png


def _luma(rgb: np.ndarray) -> np.ndarray:
    # source: OpenCV cvtColor documentation (RGB -> grey: Y = 0.299 R + 0.587 G + 0.114 B)
    rgb = rgb.astype(np.float64)
    return 0.299 * rgb[..., 0] + 0.587 * rgb[..., 1] + 0.114 * rgb[..., 2]


def test_grey_8bit(png_bytes, rng):
    # source: PNG 1.2 specification (colour type 0, bit depth 8)
    grey = rng.integers(0, 256, size=(7, 11))
    samples, maxval = read_png(png_bytes(grey, depth=8, colour=0))
    assert maxval == 255 and samples.dtype == np.uint8
    np.testing.assert_array_equal(samples, grey)


def test_grey_16bit_network_byte_order(png_bytes, rng):
    # source: PNG 1.2 specification, section 2.1 (16-bit samples are most significant byte first)
    grey = rng.integers(0, 65536, size=(5, 9))
    grey[0, 0] = 0x0102
    samples, maxval = read_png(png_bytes(grey, depth=16, colour=0))
    assert maxval == 65535 and samples.dtype == np.uint16
    np.testing.assert_array_equal(samples, grey)
    assert int(samples[0, 0]) == 258


@pytest.mark.parametrize("depth", [1, 2, 4])
def test_grey_low_depths_are_scaled_to_8bit(png_bytes, rng, depth):
    # source: PNG 1.2 specification, section 2.4 / 13.12 (a depth-d sample v means v / (2**d - 1) of full scale)
    top = 2**depth - 1
    grey = rng.integers(0, top + 1, size=(3, 13))
    samples, maxval = read_png(png_bytes(grey, depth=depth, colour=0))
    assert maxval == 255
    np.testing.assert_array_equal(samples, grey * (255 // top))


def test_rgb_8bit_converted_to_grey(png_bytes, rng):
    # source: PNG 1.2 specification (colour type 2: R, G, B per pixel)
    rgb = rng.integers(0, 256, size=(6, 4, 3))
    samples, maxval = read_png(png_bytes(rgb, depth=8, colour=2))
    assert maxval == 255 and samples.shape == (6, 4)
    assert np.abs(samples.astype(float) - _luma(rgb)).max() <= 0.51


def test_rgba_16bit_alpha_dropped(png_bytes, rng):
    # source: PNG 1.2 specification (colour type 6: R, G, B, alpha; 16-bit samples)
    rgba = rng.integers(0, 65536, size=(3, 5, 4))
    samples, maxval = read_png(png_bytes(rgba, depth=16, colour=6))
    assert maxval == 65535 and samples.dtype == np.uint16
    # OpenCV uses fixed-point weights, good to a few units in 65535
    assert np.abs(samples.astype(float) - _luma(rgba[..., :3])).max() <= 3.0


@pytest.mark.parametrize("depth", [8, 16])
def test_grey_alpha_keeps_the_grey(png_bytes, rng, depth):
    # source: PNG 1.2 specification (colour type 4: grey, alpha)
    grey = rng.integers(0, 2**depth, size=(4, 6))
    alpha = rng.integers(0, 2**depth, size=(4, 6))
    samples, _ = read_png(png_bytes(np.stack([grey, alpha], axis=-1), depth=depth, colour=4))
    np.testing.assert_array_equal(samples, grey)


@pytest.mark.parametrize("depth", [1, 2, 4, 8])
def test_palette(png_bytes, rng, depth):
    # source: PNG 1.2 specification (colour type 3: indices into PLTE, depths 1, 2, 4, 8)
    entries = 2**depth
    shades = rng.integers(0, 256, size=entries)
    palette = [(int(s), int(s), int(s)) for s in shades]  # grey entries so the expected value is exact
    index = rng.integers(0, entries, size=(5, 7))
    samples, maxval = read_png(png_bytes(index, depth=depth, colour=3, palette=palette))
    assert maxval == 255
    np.testing.assert_array_equal(samples, shades[index])


def test_colour_palette(png_bytes):
    # source: PNG 1.2 specification (PLTE entries are R, G, B)
    palette = [(255, 0, 0), (0, 255, 0), (0, 0, 255)]
    samples, _ = read_png(png_bytes(np.array([[0, 1, 2]]), depth=2, colour=3, palette=palette))
    np.testing.assert_allclose(samples[0], [0.299 * 255, 0.587 * 255, 0.114 * 255], atol=0.51)


@pytest.mark.parametrize("dtype", [np.uint8, np.uint16])
def test_round_trip_through_cv2_imencode(rng, dtype):
    # source: OpenCV imencode (an independent PNG writer)
    top = np.iinfo(dtype).max
    grey = rng.integers(0, top + 1, size=(33, 17)).astype(dtype)
    ok, encoded = cv2.imencode(".png", grey)
    assert ok
    samples, maxval = read_image(encoded.tobytes(), "cv.png")
    assert maxval == top
    np.testing.assert_array_equal(samples, grey)


def test_bgr_through_cv2_imencode(rng):
    # source: OpenCV imencode and cvtColor documentation
    bgr = rng.integers(0, 256, size=(8, 9, 3)).astype(np.uint8)
    ok, encoded = cv2.imencode(".png", bgr)
    samples, _ = read_png(encoded.tobytes())
    assert np.abs(samples.astype(float) - _luma(bgr[..., ::-1])).max() <= 0.51


def _with_ihdr(width, height, depth, colour, compression=0, filtering=0, interlace=0, good_crc=True):
    # source: PNG 1.2 specification, section 4.1.1 (IHDR: width, height, depth, colour type,
    # compression, filter, interlace)
    payload = struct.pack(">IIBBBBB", width, height, depth, colour, compression, filtering, interlace)
    crc = zlib.crc32(b"IHDR" + payload) ^ (0 if good_crc else 1)
    head = b"\x89PNG\r\n\x1a\n" + struct.pack(">I", 13) + b"IHDR" + payload + struct.pack(">I", crc)
    idat = zlib.compress(b"\x00\x00")
    tail = struct.pack(">I", len(idat)) + b"IDAT" + idat + struct.pack(">I", zlib.crc32(b"IDAT" + idat))
    return head + tail + struct.pack(">I", 0) + b"IEND" + struct.pack(">I", zlib.crc32(b"IEND"))


def test_lying_ihdr_is_refused_before_decoding(monkeypatch):
    # source: PNG 1.2 specification, section 4.1.1 (IHDR carries the size); a small file that claims
    # 100000 x 100000 pixels must be refused from the header alone: the decoder is never called
    data = _with_ihdr(100_000, 100_000, 8, 0)
    assert len(data) <= 100

    def no_decoding(*_args, **_kwargs):
        raise AssertionError("the image decoder was called for an image refused by its header")

    monkeypatch.setattr(cv2, "imdecode", no_decoding)
    with pytest.raises(MapTooLargeError, match=r"image is 100000 x 100000 = 10000000000 cells, more than the 100000000") as caught:
        read_png(data, "lie.png")
    assert caught.value.code == "map_too_large"
    with pytest.raises(MapTooLargeError):
        read_image(data, "lie.png")


def test_max_cells_boundary(png_bytes):
    data = png_bytes(np.zeros((3, 4)), depth=8, colour=0)
    assert read_png(data, max_cells=12)[0].shape == (3, 4)
    with pytest.raises(MapTooLargeError, match="4 x 3 = 12 cells, more than the 11"):
        read_png(data, "small.png", max_cells=11)


@pytest.mark.parametrize(
    ("data", "match"),
    [
        (b"\x89PNG\r\n\x1a\x0b" + bytes(40), "not a PNG image \\(bad signature"),
        (b"\x89PNG\r\n\x1a\n" + bytes(10), "truncated inside its IHDR header"),
        (_with_ihdr(2, 1, 4, 2), r"bit depth 4 is not allowed for RGB \(colour type 2\); allowed depths: 8, 16"),
        (_with_ihdr(2, 1, 16, 3), "bit depth 16 is not allowed for palette"),
        (_with_ihdr(2, 1, 3, 0), "bit depth 3 is not allowed for grey"),
        (_with_ihdr(2, 1, 8, 5), "colour type 5 does not exist"),
        (_with_ihdr(0, 1, 8, 0), "size 0 x 1"),
        (_with_ihdr(2, 2**31, 8, 0), "width and height must be 1 to 2\\^31-1"),
        (_with_ihdr(2, 1, 8, 0, compression=1), "compression 1"),
        (_with_ihdr(2, 1, 8, 0, interlace=2), "interlace 2"),
        (_with_ihdr(2, 1, 8, 0, good_crc=False), "IHDR checksum \\(CRC\\) does not match"),
        (_with_ihdr(2, 1, 8, 0)[:-20], "truncated"),
        (_with_ihdr(2, 1, 8, 0)[:45], "truncated"),
        (_with_ihdr(2, 1, 8, 3), "palette image without a PLTE chunk"),
    ],
)
def test_bad_png_is_refused(data, match):
    with pytest.raises(MapFormatError, match=match):
        read_png(data, "bad.png")


def test_missing_idat_and_damaged_chunk(png_bytes):
    good = png_bytes(np.zeros((2, 2)), depth=8, colour=0)
    no_idat = good[:33] + struct.pack(">I", 0) + b"IEND" + struct.pack(">I", zlib.crc32(b"IEND"))
    with pytest.raises(MapFormatError, match="no image data"):
        read_png(no_idat, "x.png")
    damaged = bytearray(good)
    damaged[45] ^= 0xFF  # inside the IDAT payload: its CRC no longer matches
    with pytest.raises(MapFormatError, match="checksum \\(CRC\\) of a IDAT chunk does not match"):
        read_png(bytes(damaged), "x.png")


def test_undecodable_image_data(png_bytes):
    # Valid chunk layout and CRCs, but the IDAT is not a zlib stream.
    garbage = b"this is not deflate data"
    data = png_bytes(np.zeros((2, 2)), depth=8, colour=0)
    start = data.index(b"IDAT") - 4
    idat = struct.pack(">I", len(garbage)) + b"IDAT" + garbage + struct.pack(">I", zlib.crc32(b"IDAT" + garbage))
    data = data[:start] + idat + struct.pack(">I", 0) + b"IEND" + struct.pack(">I", zlib.crc32(b"IEND"))
    with pytest.raises(MapFormatError, match="^x.png: PNG image data could not be decoded"):
        read_png(data, "x.png")


def test_ancillary_chunks_are_passed_over(png_bytes):
    # source: PNG 1.2 specification, section 4.4 (ancillary chunks, lower-case first letter, may be ignored)
    grey = np.arange(6).reshape(2, 3) * 40
    data = png_bytes(grey, depth=8, colour=0, extra_chunks=((b"tEXt", b"Comment\x00a yard"),))
    np.testing.assert_array_equal(read_png(data)[0], grey)
