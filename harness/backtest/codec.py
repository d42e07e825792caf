"""Compact, lossless storage of predictive draws in Parquet (the ledger's and the task cache's).

Two layouts of a ``draws`` column (one row per forecast cell: model, origin, variable, horizon):

``sorted`` (the ledger's default)
    Each cell's float32 draws sorted ascending, stored as *order keys*: the float's 32 bits read
    as an integer and, for negative numbers, the 31 low bits flipped, so that keys sort like the
    floats (:func:`order_keys`; the map is its own inverse). Sorted keys differ little from one
    draw to the next, and Parquet's ``DELTA_BINARY_PACKED`` encoding stores those differences
    bit-packed: about 2.2 bytes a draw instead of 4, with every float32 value kept exactly.
    What is dropped is the order of the draws: draw ``d`` of one cell and draw ``d`` of another
    are no longer one joint path. Every score of the harness is computed per cell and does not
    depend on the order of the draws; the joint paths stay in the task cache
    (:meth:`harness.backtest.Ledger.joint_draws`).
``joint``
    float32 in draw order with the ``BYTE_STREAM_SPLIT`` encoding and zstd (about 3.3 bytes a
    draw): the task cache always, and the ledger when ``[run] ledger = "joint"``.

A third layout is only read: ``float32`` (plain float32 lists), written before the ledger kept
a layout (run manifests of format ``run-manifest/2``).
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

#: layouts this version writes
LAYOUTS = ("sorted", "joint")
#: layouts this version reads (``float32``: ledgers written before layouts existed)
READ_LAYOUTS = ("float32", "joint", "sorted")
_FLIP = np.int32(0x7FFFFFFF)
DRAWS_LEAF = "draws.list.element"  # the Parquet path of a fixed-size list column's values


def order_keys(values: np.ndarray) -> np.ndarray:
    """int32 keys of float32 values that sort exactly as the values do (NaN aside).

    For non-negative floats the IEEE-754 bit pattern read as a signed integer already sorts
    like the value; for negative ones (sign bit set, negative as integers) flipping the 31 low
    bits reverses their order, which makes the map monotone over all floats. Applying the map
    twice gives back the bits (it is an involution), see :func:`from_order_keys`.

    References
    ----------
    IEEE Std 754-2019, sect. 3.4 (binary interchange format: sign, biased exponent, trailing
    significand), whose layout makes the bit patterns of non-negative floats sort like their
    values (common practice in radix sorts of floats).
    """
    bits = np.ascontiguousarray(values, dtype=np.float32).view(np.int32)
    return bits ^ ((bits >> 31) & _FLIP)


def from_order_keys(keys: np.ndarray) -> np.ndarray:
    """float32 values of :func:`order_keys` keys (the inverse map)."""
    k = np.ascontiguousarray(keys, dtype=np.int32)
    return (k ^ ((k >> 31) & _FLIP)).view(np.float32)


def encode(draws: np.ndarray, layout: str) -> pa.FixedSizeListArray:
    """A ``(rows, n_draws)`` float32 array as the ``draws`` column of ``layout``."""
    arr = np.ascontiguousarray(draws, dtype=np.float32)
    rows, n = arr.shape
    if layout == "sorted":
        keys = order_keys(arr)
        keys.sort(axis=1)  # integer sort: -0.0 before +0.0, a total order the decoder keeps
        flat = pa.array(keys.reshape(-1), type=pa.int32())
    elif layout == "joint":
        flat = pa.array(arr.reshape(-1), type=pa.float32())
    else:
        raise ValueError(f"unknown draws layout {layout!r}; expected one of {', '.join(sorted(LAYOUTS))}")
    return pa.FixedSizeListArray.from_arrays(flat, n)


def decode(column: pa.ChunkedArray | pa.Array, layout: str) -> np.ndarray:
    """The ``draws`` column of ``layout`` as a ``(rows, n_draws)`` float32 array."""
    if layout not in READ_LAYOUTS:
        raise ValueError(f"unknown draws layout {layout!r}; this version reads {', '.join(sorted(READ_LAYOUTS))}")
    col = column.combine_chunks() if isinstance(column, pa.ChunkedArray) else column
    n = col.type.list_size
    flat = col.flatten().to_numpy(zero_copy_only=False)
    if layout == "sorted":
        keys = np.array(flat, dtype=np.int32)  # a writable copy, turned into the floats in place
        mask = keys >> 31
        mask &= _FLIP
        keys ^= mask
        return keys.view(np.float32).reshape(len(col), n)
    return np.asarray(flat, dtype=np.float32).reshape(len(col), n)


def draws_type(layout: str, n_draws: int) -> pa.DataType:
    """The Arrow type of a ``draws`` column of ``layout`` (for empty tables)."""
    return pa.list_(pa.int32() if layout == "sorted" else pa.float32(), n_draws)


def write_table(table: pa.Table, sink, layout: str) -> None:
    """Write a table with a ``draws`` column of ``layout`` with that layout's Parquet encoding."""
    strings = [f.name for f in table.schema if pa.types.is_string(f.type)]
    kw: dict = {"use_dictionary": strings, "compression": "zstd"}
    if "draws" in table.column_names:
        if layout == "sorted":
            # the deltas are bit-packed already: zstd on top takes off under 2 % and costs a
            # fifth of the write time, so the draws go uncompressed
            kw["column_encoding"] = {DRAWS_LEAF: "DELTA_BINARY_PACKED"}
            kw["compression"] = {c: ("none" if c == "draws" else "zstd") for c in table.column_names}
        else:
            kw["column_encoding"] = {DRAWS_LEAF: "BYTE_STREAM_SPLIT"}
    pq.write_table(table, sink, **kw)
