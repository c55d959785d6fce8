"""PGM decoding against files written byte by byte from the Netpbm specification."""

from __future__ import annotations

import struct

import numpy as np
import pytest

from veer.maps import MapFormatError, MapTooLargeError, pixels_on_8bit_scale, read_image, read_pgm


def test_p5_8bit_reads_back_exactly():
    # source: Netpbm PGM specification (magic, width, height, maxval, one whitespace, raster top to bottom)
    data = b"P5\n3 2\n255\n" + bytes([0, 128, 255, 10, 20, 30])
    samples, maxval = read_pgm(data)
    assert maxval == 255
    assert samples.dtype == np.uint8
    np.testing.assert_array_equal(samples, [[0, 128, 255], [10, 20, 30]])


def test_p5_16bit_big_endian_with_header_comments():
    # source: Netpbm PGM specification (2-byte samples when maxval > 255, most significant byte first;
    # "#" to end of line is a comment in the header)
    data = b"P5\n# written by hand\n2 # width\n2\n# maxval follows\n65535\n" + struct.pack(">4H", 0, 258, 65535, 4660)
    samples, maxval = read_pgm(data)
    assert maxval == 65535
    assert samples.dtype == np.uint16
    np.testing.assert_array_equal(samples, [[0, 258], [65535, 4660]])


def test_p5_16bit_small_maxval():
    # source: Netpbm PGM specification (maxval 1000 > 255, so two bytes per sample)
    data = b"P5 2 1 1000\n" + struct.pack(">2H", 1000, 1)
    samples, maxval = read_pgm(data)
    assert maxval == 1000
    np.testing.assert_array_equal(samples, [[1000, 1]])


def test_p2_plain_with_comments():
    # source: Netpbm PGM specification (plain format: ASCII decimals separated by whitespace)
    data = b"P2\n# a plain map\n4 3\n# maxval\n15\n0 1 2 3\n4  5\t6 7\r\n 8 9 10 15\n"
    samples, maxval = read_pgm(data)
    assert maxval == 15
    assert samples.dtype == np.uint8
    np.testing.assert_array_equal(samples, np.array([[0, 1, 2, 3], [4, 5, 6, 7], [8, 9, 10, 15]]))


def test_p2_comment_inside_raster_is_skipped():
    # veer's own leniency: a comment among plain samples is skipped like whitespace.
    samples, _ = read_pgm(b"P2 2 2 255\n1 2 # first row\n3 4\n")
    np.testing.assert_array_equal(samples, [[1, 2], [3, 4]])


def test_p2_16bit():
    # source: Netpbm PGM specification (plain samples up to maxval 65535)
    samples, maxval = read_pgm(b"P2 3 1 65535 0 32768 65535")
    assert samples.dtype == np.uint16 and maxval == 65535
    np.testing.assert_array_equal(samples, [[0, 32768, 65535]])


@pytest.mark.parametrize("first", [0x0A, 0x20, 0x09])
def test_raster_whose_first_byte_is_whitespace(first):
    # source: Netpbm PGM specification (exactly one whitespace byte after maxval; the raster may begin
    # with a byte that looks like whitespace)
    data = b"P5\n2 1\n255\n" + bytes([first, 77])
    samples, _ = read_pgm(data)
    np.testing.assert_array_equal(samples, [[first, 77]])


def test_comment_right_after_maxval_ends_the_header():
    # source: Netpbm PGM specification (comments may stand anywhere before the whitespace ending maxval)
    data = b"P5 2 1 255# done\n" + bytes([0x0A, 5])
    samples, _ = read_pgm(data)
    np.testing.assert_array_equal(samples, [[10, 5]])


def test_only_first_image_of_a_multi_image_file_is_read():
    # source: Netpbm PGM specification (a file may hold several images back to back)
    first = b"P5 2 1 255\n" + bytes([1, 2])
    second = b"P5 3 1 255\n" + bytes([7, 8, 9])
    samples, _ = read_pgm(first + second)
    np.testing.assert_array_equal(samples, [[1, 2]])
    plain = b"P2 2 1 255\n3 4\nP2 1 1 255\n9\n"
    samples, _ = read_pgm(plain)
    np.testing.assert_array_equal(samples, [[3, 4]])


def test_read_image_dispatches_on_magic():
    samples, maxval = read_image(b"P5 1 1 255\n" + bytes([42]), "m.pgm")
    assert int(samples[0, 0]) == 42 and maxval == 255


def test_pixels_on_8bit_scale():
    # docs/files.md, "Map image" (a pixel counts as value * 255 / maxval)
    samples = np.array([[0, 5, 15]], dtype=np.uint8)
    pixels = pixels_on_8bit_scale(samples, 15)
    assert pixels.dtype == np.float32
    np.testing.assert_array_equal(pixels, [[0.0, 85.0, 255.0]])
    wide = np.array([[25700, 25699, 65535]], dtype=np.uint16)
    np.testing.assert_array_equal(pixels_on_8bit_scale(wide, 65535)[0, [0, 2]], [100.0, 255.0])
    assert pixels_on_8bit_scale(wide, 65535)[0, 1] < 100.0
    with pytest.raises(MapFormatError, match="maxval must be an integer from 1 to 65535"):
        pixels_on_8bit_scale(samples, 0)


@pytest.mark.parametrize(
    ("data", "match"),
    [
        (b"", "the file is empty"),
        (b"P6\n1 1\n255\n\x00\x00\x00", "not a PGM image .*expected P5 or P2"),
        (b"GIF89a", "not a PGM image"),
        (b"P5x 1 1 255\n\x00", "must be followed by whitespace"),
        (b"P5\n3 2\n255\n" + bytes(5), "raster is truncated: 3 x 2 samples need 6 bytes, the file has 5"),
        (b"P5\n2 1\n65535\n" + bytes(3), "raster is truncated: 2 x 1 samples need 4 bytes"),
        (b"P5\n2 1\n255", "raster is missing"),
        (b"P5\n2 1\n255\n", "2 x 1 samples need 2 bytes, the file has 0"),
        (b"P5\n0 4\n255\n", r"empty \(0 x 4\)"),
        (b"P5\n4 0\n255\n", r"empty \(4 x 0\)"),
        (b"P5\n1 1\n0\n\x00", "maxval is 0; veer accepts 1 to 65535"),
        (b"P5\n1 1\n65536\n\x00\x00", "maxval is 65536"),
        (b"P5\n1\n", "expected the height as a decimal number, found the end of the file"),
        (b"P5\n-1 1 255\n", "expected the width as a decimal number"),
        (b"P5\n1x 1 255\n", "the width is followed by b'x'"),
        (b"P5\n1 1 100\n" + bytes([200]), "sample value 200 is above the maxval 100"),
        (b"P2\n2 1\n255\n1 300\n", "sample value 300 is above the maxval 255"),
        (b"P2\n2 1\n255\n1 x\n", "plain PGM sample b'x' is not a decimal number"),
        (b"P2\n2 1\n255\n1 -2\n", "plain PGM sample b'-2' is not a decimal number"),
        (b"P2\n3 1\n255\n1 2\n", "plain PGM raster is truncated: found 2 of 3 samples"),
        (b"P5 1234567890123 1 255\n", "the width has 13 digits"),
    ],
)
def test_bad_pgm_is_refused(data, match):
    # source: Netpbm PGM specification (what a valid header and raster look like)
    with pytest.raises(MapFormatError, match=match):
        read_pgm(data, "bad.pgm")


def test_error_names_the_source():
    with pytest.raises(MapFormatError, match=r"^maps/yard\.pgm: "):
        read_pgm(b"P5 1 1 255\n", "maps/yard.pgm")


def test_too_many_cells_is_refused_from_the_header():
    data = b"P5 4 3 255\n"  # no raster at all: the size alone must refuse it
    with pytest.raises(MapTooLargeError, match="image is 4 x 3 = 12 cells, more than the 11 veer accepts"):
        read_pgm(data, "big.pgm", max_cells=11)
    samples, _ = read_pgm(data + bytes(12), max_cells=12)
    assert samples.shape == (3, 4)


@pytest.mark.parametrize(
    ("magic", "kind"), [(b"P1", "PBM"), (b"P4", "PBM"), (b"P3", "PPM"), (b"P6", "PPM")]
)
def test_other_netpbm_kinds_are_named(magic, kind):
    # source: Netpbm PGM specification (P2/P5 are PGM; P1/P4 PBM and P3/P6 PPM are its siblings)
    with pytest.raises(MapFormatError, match=f"this is a {kind}"):
        read_image(magic + b" 1 1 255\n\x00\x00\x00", "x.pnm")


def test_unknown_magic():
    with pytest.raises(MapFormatError, match="not a PGM or PNG image"):
        read_image(b"BM6\x00\x00\x00", "x.bmp")


@pytest.mark.parametrize("maxval", [255, 100, 65535, 4095])
def test_p5_agrees_with_opencv(pgm_bytes, rng, maxval):
    # source: OpenCV imdecode (an independent PGM reader)
    import cv2

    shades = rng.integers(0, maxval + 1, size=(13, 21))
    data = pgm_bytes(shades, maxval, header_comment=b"# made for a test\n")
    ours, _ = read_pgm(data)
    theirs = cv2.imdecode(np.frombuffer(data, np.uint8), cv2.IMREAD_UNCHANGED)
    np.testing.assert_array_equal(ours, theirs)
    np.testing.assert_array_equal(ours, shades)
