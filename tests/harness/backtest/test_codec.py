"""The draws codec: order keys sort like the floats, and every layout gives back what was written."""

from __future__ import annotations

import struct

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from harness.backtest import codec

FLOAT32 = st.floats(width=32, allow_nan=False)


def _key_reference(x: float) -> int:
    """The order key of one float32 from its IEEE-754 bits (struct), by the textbook rule."""
    (bits,) = struct.unpack("<i", struct.pack("<f", x))
    return bits ^ 0x7FFFFFFF if bits < 0 else bits


@given(st.lists(FLOAT32, min_size=1, max_size=200))
@settings(max_examples=200, deadline=None)
def test_order_keys_match_reference_and_sort_like_floats(values):
    """Keys equal the bit-level reference, their order is the floats' order, and decoding inverts them."""
    x = np.array(values, dtype=np.float32)
    keys = codec.order_keys(x)
    assert keys.tolist() == [_key_reference(float(v)) for v in x]
    # IEEE-754 (common practice): a < b as floats implies key(a) < key(b); -0.0 < +0.0 as keys
    xs = x[np.argsort(keys, kind="stable")]
    assert np.all(xs[1:] >= xs[:-1])
    assert codec.from_order_keys(keys).view(np.int32).tolist() == x.view(np.int32).tolist()


def test_order_keys_of_special_values():
    """Infinities, signed zeros and subnormals keep their order (IEEE-754 total order, common practice)."""
    x = np.array([np.inf, -np.inf, 0.0, -0.0, 1e-45, -1e-45, 3.4e38, -3.4e38], dtype=np.float32)
    keys = codec.order_keys(x)
    expected = [-np.inf, -3.4e38, -1e-45, -0.0, 0.0, 1e-45, 3.4e38, np.inf]
    got = codec.from_order_keys(np.sort(keys))
    assert got.tolist() == np.array(expected, dtype=np.float32).tolist()
    assert np.signbit(got[3]) and not np.signbit(got[4])


@pytest.mark.parametrize("layout", ["sorted", "joint"])
@given(data=arrays(np.float32, st.tuples(st.integers(1, 6), st.integers(1, 40)), elements=FLOAT32))
@settings(max_examples=60, deadline=None)
def test_parquet_round_trip(tmp_path_factory, layout, data):
    """Written with the layout's encoding and read back: sorted gives each row sorted, joint gives the rows as written."""
    path = tmp_path_factory.mktemp("codec") / "t.parquet"
    table = pa.table({"row": pa.array(np.arange(len(data))), "draws": codec.encode(data, layout)})
    codec.write_table(table, str(path), layout)
    back = codec.decode(pq.read_table(path).column("draws"), layout)
    want = np.sort(data, axis=1) if layout == "sorted" else data
    # bit-level equality: every float32 is kept exactly (signed zeros included)
    if layout == "joint":
        assert back.view(np.int32).tolist() == want.view(np.int32).tolist()
    else:
        assert back.tolist() == want.tolist()
        assert np.all(back[:, 1:] >= back[:, :-1])


def test_sorted_layout_is_delta_packed_and_smaller():
    """The sorted layout's draws column uses DELTA_BINARY_PACKED and takes under 3 bytes a normal draw.

    2,000 standard-normal draws per row: the order keys of neighbouring sorted draws differ by
    about 2^14, so about 2 bytes a draw after bit-packing (plain float32 is 4).
    """
    rng = np.random.default_rng(1)
    data = rng.standard_normal((200, 2000)).astype(np.float32) * 3 + 1
    sink = pa.BufferOutputStream()
    codec.write_table(pa.table({"draws": codec.encode(data, "sorted")}), sink, "sorted")
    buf = sink.getvalue()
    meta = pq.ParquetFile(pa.BufferReader(buf)).metadata.row_group(0).column(0)
    assert "DELTA_BINARY_PACKED" in meta.encodings
    assert len(buf) / data.size < 3.0


def test_unknown_layout_is_refused():
    """An unknown layout name is refused, listing the known ones."""
    with pytest.raises(ValueError, match="joint, sorted"):
        codec.encode(np.zeros((1, 3), np.float32), "packed")
    with pytest.raises(ValueError, match="float32, joint, sorted"):
        codec.decode(pa.array([[1.0]], pa.list_(pa.float32(), 1)), "packed")
