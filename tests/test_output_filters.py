"""HDF5 compression and checksum filters on the particle datasets ([output] compression, fletcher32).

The filters must not change a single value (deflate and shuffle are lossless; HDF5 User's
Guide, "Filters"), the data must still be streamed (chunks filled block by block), and
HDF5's own Fletcher-32 check must catch a corrupted chunk on read.
"""

import h5py
import numpy as np
import pytest

from icgen import io_hdf5
from icgen.cli import main

SMALL = ["--set", "box.particles_per_side=32", "--set", "box.size=50.0", "--quiet"]


def _ics(tmp_path, name, *settings):
    out = tmp_path / f"{name}.h5"
    argv = ["ics", "--out", str(out)] + SMALL
    for s in settings:
        argv += ["--set", s]
    assert main(argv) == 0
    return out


@pytest.fixture(scope="module")
def plain(tmp_path_factory):
    return _ics(tmp_path_factory.mktemp("plain"), "plain")


@pytest.mark.parametrize("settings", [
    ("output.compression=gzip",),
    ("output.compression=gzip", "output.compression_level=9", "output.fletcher32=true"),
    ("output.fletcher32=true",),
])
def test_filtered_file_holds_the_same_values(tmp_path, plain, settings):
    out = _ics(tmp_path, "filtered", *settings)
    with h5py.File(plain) as a, h5py.File(out) as b:
        for name in ("position", "velocity", "id"):
            da, db = a["particles"][name], b["particles"][name]
            np.testing.assert_array_equal(da[...], db[...])
            # the stored CRC-32 is of the values, so it does not depend on the filters
            assert int(da.attrs["checksum_crc32"]) == int(db.attrs["checksum_crc32"])
            assert da.chunks is None and db.chunks is not None
            assert db.fletcher32 == ("output.fletcher32=true" in settings)
            gz = "output.compression=gzip" in settings
            assert (db.compression == "gzip") == gz and db.shuffle == gz
    assert io_hdf5.verify_file(out, full=True) == []
    assert main(["inspect", str(out)]) == 0


def test_gzip_makes_the_file_smaller(tmp_path, plain):
    out = _ics(tmp_path, "gz", "output.compression=gzip")
    # Ids (a ramp) and shuffled float32 coordinates compress; how much is data dependent,
    # so only the direction is asserted.
    assert out.stat().st_size < plain.stat().st_size


def test_fletcher32_catches_a_corrupted_chunk(tmp_path):
    out = _ics(tmp_path, "f32", "output.fletcher32=true")
    with h5py.File(out) as f:
        ds = f["particles/velocity"]
        offset = ds.id.get_chunk_info(0).byte_offset
    with open(out, "r+b") as fh:  # flip one byte inside the first chunk's data
        fh.seek(offset + 100)
        b = fh.read(1)
        fh.seek(offset + 100)
        fh.write(bytes([b[0] ^ 0xFF]))
    with h5py.File(out) as f, pytest.raises(OSError):
        f["particles/velocity"][...]


def test_bad_compression_settings_are_refused_before_any_file(tmp_path, capsys):
    for setting, words in (("output.compression=zstd", "compression"),
                           ("output.compression_level=12", "compression_level")):
        out = tmp_path / "x.h5"
        assert main(["ics", "--out", str(out), "--set", setting] + SMALL) == 2
        err = capsys.readouterr().err
        assert words in err
        assert list(tmp_path.iterdir()) == []
