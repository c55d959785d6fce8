"""Fuzz the map image decoders (read_image, read_pgm, read_png, load_map) with mutated files.

Property: every input decodes to valid grey samples or raises a MapError with a code and
a one-line message; nothing else escapes, nothing hangs. A PNG whose header claims more
cells than allowed is refused before OpenCV is ever called.
"""

from __future__ import annotations

import zlib
from unittest import mock

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

import fuzzkit
from fuzzkit import fuzz_settings, mutated, outcome, pgm_seeds, png_seeds
from veer.maps import MapError, MapTooLargeError, OccupancyGrid, images, load_map, read_image, read_pgm, read_png

SMALL_MAX_CELLS = 200_000  # keeps any decoder allocation to a few megabytes


def assert_valid_samples(result, max_cells: int) -> None:
    samples, maxval = result
    assert isinstance(samples, np.ndarray) and samples.ndim == 2
    assert samples.dtype in (np.uint8, np.uint16)
    assert 1 <= samples.size <= max_cells
    assert isinstance(maxval, int) and 1 <= maxval <= 65535
    assert int(samples.max()) <= maxval


def decode_all_ways(data: bytes, max_cells: int = SMALL_MAX_CELLS) -> None:
    """read_image and both format readers: valid samples or a MapError, and they agree."""
    found, error = outcome(read_image, data, "fuzz", max_cells=max_cells, allowed=(MapError,))
    if found is not None:
        assert_valid_samples(found, max_cells)
    for reader in (read_pgm, read_png):
        direct, _ = outcome(reader, data, "fuzz", max_cells=max_cells, allowed=(MapError,))
        if direct is not None:
            assert_valid_samples(direct, max_cells)
            # read_image dispatches on the magic: whatever a reader accepts, read_image gives the same
            assert found is not None and np.array_equal(direct[0], found[0]) and direct[1] == found[1]


# ------------------------------------------------------------------ the seeds are valid files


@given(rows=st.integers(1, 6), cols=st.integers(1, 6), maxval=st.sampled_from([1, 255, 256, 65535]),
       seed=st.integers(0, 2**32 - 1), raw=st.booleans())
@fuzz_settings(ci=20, deep=200)
def test_pgm_seeds_decode_to_their_samples(rows, cols, maxval, seed, raw):
    samples = np.random.default_rng(seed).integers(0, maxval + 1, size=(rows, cols))
    data = fuzzkit.pgm_p5(samples, maxval) if raw else fuzzkit.pgm_p2(samples, maxval)
    decoded, decoded_maxval = read_pgm(data)
    assert decoded_maxval == maxval and np.array_equal(decoded, samples)  # source: Netpbm pgm spec


@given(rows=st.integers(1, 6), cols=st.integers(1, 6), depth=st.sampled_from([1, 2, 4, 8, 16]),
       seed=st.integers(0, 2**32 - 1))
@fuzz_settings(ci=20, deep=200)
def test_grey_png_seeds_decode_to_their_samples(rows, cols, depth, seed):
    samples = np.random.default_rng(seed).integers(0, 2**depth, size=(rows, cols))
    decoded, maxval = read_png(fuzzkit.png_file(samples, depth, 0))
    if depth == 16:
        assert maxval == 65535 and np.array_equal(decoded, samples)  # source: PNG 1.2 specification, 2.4
    elif depth == 8:
        assert maxval == 255 and np.array_equal(decoded, samples)
    else:
        # depths 1, 2, 4 are scaled to 8 bits by bit replication: v * 255 / (2^depth - 1)
        # source: PNG 1.2 specification, section 10.4 (sample depth rescaling; section number from memory)
        assert maxval == 255 and np.array_equal(decoded, samples * (255 // (2**depth - 1)))


# ------------------------------------------------------------------ mutated files


@given(data=mutated(pgm_seeds()))
@fuzz_settings(ci=500, deep=6000)
def test_mutated_pgm_decodes_or_is_refused(data):
    decode_all_ways(data)


@given(data=mutated(png_seeds()), fix_crcs=st.booleans())
@fuzz_settings(ci=500, deep=6000)
def test_mutated_png_decodes_or_is_refused(data, fix_crcs):
    # with the checksums mended the damage reaches the zlib stream and the decoder
    decode_all_ways(fuzzkit.fix_png_crcs(data) if fix_crcs else data)


@given(data=st.binary(max_size=200) | st.builds(lambda tail: b"P5" + tail, st.binary(max_size=64))
       | st.builds(lambda tail: fuzzkit.PNG_SIGNATURE + tail, st.binary(max_size=64)))
@fuzz_settings(ci=150, deep=3000)
def test_arbitrary_bytes_decode_or_are_refused(data):
    decode_all_ways(data)


# ------------------------------------------------------------------ header fields


def header_number():
    return st.one_of(
        st.integers(0, 20).map(str),
        st.integers(0, 10**14).map(str),
        st.sampled_from(["-1", "+3", "0x10", "1e3", "3.5", "", "65536", "65535", "256", "999999999999"]),
        st.text(alphabet="0123456789 #\n\t", max_size=8),
    )


@st.composite
def pgm_with_mutated_header(draw) -> bytes:
    """A PGM whose magic, size, maxval and separators are drawn, followed by a drawn raster."""
    magic = draw(st.sampled_from(["P5", "P2", "P2", "P5", "P1", "P3", "P6", "P7", "p5", "P"]))
    gaps = st.sampled_from([" ", "\n", "\t", "\r\n", "  ", "\n# comment\n", "#c\n", "", "\v", "\f"])
    header = magic
    for _ in range(3):
        header += draw(gaps) + draw(header_number())
    header += draw(st.sampled_from(["\n", " ", "", "# end\n", "\r"]))
    if draw(st.booleans()):
        raster = draw(st.binary(max_size=300))
    else:
        raster = " ".join(str(v) for v in draw(st.lists(st.integers(-5, 70000), max_size=60))).encode()
    return header.encode("latin-1") + raster


@given(data=pgm_with_mutated_header())
@fuzz_settings(ci=500, deep=6000)
def test_pgm_header_mutations_decode_or_are_refused(data):
    decode_all_ways(data)


@st.composite
def png_with_mutated_header(draw) -> bytes:
    """A PNG whose IHDR fields are drawn (checksum correct), with a real small IDAT after it."""
    width = draw(st.integers(0, 40) | st.integers(0, 2**32 - 1))
    height = draw(st.integers(0, 40) | st.integers(0, 2**32 - 1))
    depth = draw(st.sampled_from([0, 1, 2, 3, 4, 8, 16, 32, 255]))
    colour = draw(st.sampled_from([0, 1, 2, 3, 4, 5, 6, 7, 255]))
    fields = draw(st.tuples(st.sampled_from([0, 0, 1]), st.sampled_from([0, 0, 1]), st.sampled_from([0, 0, 1, 2])))
    scan = draw(st.binary(max_size=400))
    chunks = fuzzkit.png_ihdr(width, height, depth, colour, *fields)
    if draw(st.booleans()):
        chunks += fuzzkit.png_chunk(b"PLTE", draw(st.binary(max_size=30)))
    chunks += fuzzkit.png_chunk(b"IDAT", zlib.compress(scan))
    return fuzzkit.PNG_SIGNATURE + chunks + fuzzkit.png_chunk(b"IEND", b"")


@given(data=png_with_mutated_header(), max_cells=st.sampled_from([1, 100, 1600, SMALL_MAX_CELLS]))
@fuzz_settings(ci=500, deep=6000)
def test_png_header_mutations_decode_or_are_refused(data, max_cells):
    decode_all_ways(data, max_cells)


# ------------------------------------------------------------------ a tiny PNG that claims gigabytes


def claiming_png(width: int, height: int, depth: int = 16, colour: int = 6) -> bytes:
    """Under 100 bytes: a valid IHDR claiming width x height pixels, one small IDAT, IEND."""
    # source: PNG 1.2 specification, sections 3.2 and 4.1.1
    return (fuzzkit.PNG_SIGNATURE + fuzzkit.png_ihdr(width, height, depth, colour)
            + fuzzkit.png_chunk(b"IDAT", zlib.compress(b"\x00" * 16)) + fuzzkit.png_chunk(b"IEND", b""))


def test_a_tiny_png_claiming_gigabytes_is_refused_before_decoding():
    # 100000 x 100000 RGBA at 16 bits: 10^10 pixels, 80 GB decoded
    data = claiming_png(100_000, 100_000)
    assert len(data) < 100
    with mock.patch.object(images.cv2, "imdecode", side_effect=AssertionError("decoder called")) as decoder:
        for reader in (read_png, read_image):
            with pytest.raises(MapTooLargeError) as refused:
                reader(data, "huge.png")
            assert refused.value.code == "map_too_large"
        assert decoder.call_count == 0


@given(width=st.integers(1, 2**32 - 1), height=st.integers(1, 2**32 - 1),
       colour_depth=st.sampled_from([(0, 1), (0, 16), (2, 8), (3, 8), (4, 16), (6, 16)]),
       max_cells=st.integers(1, 10**8))
@fuzz_settings(ci=150, deep=3000)
def test_any_png_claiming_more_than_max_cells_never_reaches_the_decoder(width, height, colour_depth, max_cells):
    colour, depth = colour_depth
    data = claiming_png(width, height, depth, colour)
    max_cells = min(max_cells, width * height - 1)  # always one cell too many, at least
    if max_cells < 1:
        return  # a one-pixel image is never too large
    with mock.patch.object(images.cv2, "imdecode", side_effect=AssertionError("decoder called")) as decoder:
        found, error = outcome(read_image, data, "claims.png", max_cells=max_cells, allowed=(MapError,))
        assert decoder.call_count == 0
    assert found is None
    assert error.code in ("map_too_large", "bad_image")  # bad_image: a size above 2^31-1 is not a PNG size


# ------------------------------------------------------------------ load_map on files


@pytest.fixture(scope="module")
def map_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz_maps")


@given(data=mutated(pgm_seeds()) | mutated(png_seeds()) | pgm_with_mutated_header(),
       suffix=st.sampled_from([".pgm", ".png", ".PGM", ""]),
       cell_size_m=st.none() | st.just(0.1) | fuzzkit.number_like(),
       sidecar=st.none() | st.text(max_size=80) | st.sampled_from(["cell_size_m = 0.05\n", "origin_m = [1, 2]\n"]))
@fuzz_settings(ci=150, deep=3000)
def test_load_map_loads_or_refuses(map_dir, data, suffix, cell_size_m, sidecar):
    image = map_dir / f"map{suffix}"
    side = map_dir / "map.toml"
    image.write_bytes(data)
    if sidecar is None:
        side.unlink(missing_ok=True)
    else:
        side.write_text(sidecar, encoding="utf-8", errors="surrogatepass")
    grid, error = outcome(load_map, image, cell_size_m=cell_size_m, max_cells=SMALL_MAX_CELLS, allowed=(MapError,))
    if grid is not None:
        assert isinstance(grid, OccupancyGrid)
        assert grid.classes.dtype == np.uint8 and set(np.unique(grid.classes)) <= {0, 1, 2}
        assert 0 < grid.rows * grid.cols <= SMALL_MAX_CELLS
        assert np.isfinite(grid.cell_size_m) and grid.cell_size_m > 0
