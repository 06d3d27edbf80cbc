"""Memory and disk preflight: refuse before any work, and name the largest grid that fits."""

import pytest

from icgen import preflight
from icgen.errors import InputError


def test_model_and_largest_grid_are_consistent():
    limit = 4 * 2**30
    for order in (1, 2):
        for precision in ("float32", "float64"):
            n = preflight.largest_grid(limit, order, precision)
            assert n % 2 == 0 and n > 0
            assert preflight.peak_memory(n, order, precision) <= limit < preflight.peak_memory(n + 2, order, precision)
    # float64 doubles the arrays; second order needs more than first; R ranks divide the arrays.
    assert preflight.bytes_per_particle(1, "float64") == 2 * preflight.bytes_per_particle(1, "float32")
    assert preflight.bytes_per_particle(2, "float32") > preflight.bytes_per_particle(1, "float32")
    assert preflight.peak_memory(512, 2, "float32", ranks=4) < preflight.peak_memory(512, 2, "float32")


def test_check_refuses_with_the_largest_grid(tmp_path):
    with pytest.raises(InputError, match=r"more than --max-memory .* largest grid that fits is \d+\^3"):
        preflight.check(1024, 2, "float32", True, tmp_path / "x.h5", max_memory=2 * 2**30)
    need, size = preflight.check(32, 1, "float32", True, tmp_path / "x.h5", max_memory=2 * 2**30)
    assert size == 32**3 * (6 * 4 + 8) and need > preflight.BASE_BYTES
    assert not list(tmp_path.iterdir())  # nothing written


def test_parse_size():
    assert preflight.parse_size("20G") == 20 * 2**30
    assert preflight.parse_size("512MiB") == 512 * 2**20
    assert preflight.parse_size("1000") == 1000
    for bad in ("", "-1G", "lots", "3X"):
        with pytest.raises(InputError, match="--max-memory"):
            preflight.parse_size(bad)


def test_lanes_are_capped_and_their_buffers_counted():
    # One lane per FFT thread, at most MAX_LANES; each lane holds 9 words per block row.
    assert preflight.lanes(1) == 1
    assert preflight.lanes(10**6) == preflight.MAX_LANES
    assert preflight.lane_bytes("float64") == 2 * preflight.lane_bytes("float32") == 2 * 36 * preflight.BLOCK_ROWS
    extra = preflight.peak_memory(64, 1, "float32", workers=4) - preflight.peak_memory(64, 1, "float32", workers=1)
    assert extra == 3 * preflight.lane_bytes("float32")
