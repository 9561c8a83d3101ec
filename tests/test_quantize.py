"""The error bound is made in prequantization; these tests attack it.

Reference for the bound: a uniform quantizer with step Δ has maximum error
Δ/2 (textbook, e.g. Gersho & Gray, *Vector Quantization and Signal
Compression*, ch. 5 — from memory); with Δ = 2ε the bound is ε.  The code
must keep it *including float rounding*, which the textbook ignores.
"""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from tsarchive.quantize import Grid, make_grid, quantize, values_to_bits

floats64 = st.floats(allow_nan=True, allow_infinity=True, width=64)
floats32 = st.floats(allow_nan=True, allow_infinity=True, width=32)
eps_st = st.floats(min_value=1e-12, max_value=1e6, allow_nan=False, allow_infinity=False)


def _check_bound(x: np.ndarray, grid: Grid) -> None:
    q, pos, bits = quantize(x, grid)
    xh = grid.dequantize(q, pos, bits)
    assert xh.dtype == x.dtype
    x64, xh64 = x.astype(np.float64), xh.astype(np.float64)
    fin = np.isfinite(x64)
    # in float64 and in the output dtype (xh is already in it)
    assert np.all(np.abs(xh64[fin] - x64[fin]) <= grid.eps)
    # NaN and ±Inf come back exactly, at their positions
    assert np.array_equal(values_to_bits(xh[~fin]), values_to_bits(x[~fin]))


@given(hnp.arrays(np.float64, st.integers(1, 300), elements=floats64), eps_st)
def test_bound_float64(x, eps):
    _check_bound(x, make_grid(eps, None, x.dtype, anchor=float(np.nan_to_num(x[0], posinf=0, neginf=0))))


@given(hnp.arrays(np.float32, st.integers(1, 300), elements=floats32), eps_st)
def test_bound_float32(x, eps):
    _check_bound(x, make_grid(eps, None, x.dtype, anchor=0.0))


@given(hnp.arrays(np.float64, st.integers(1, 200), elements=st.floats(-1e300, 1e300)),
       st.floats(1e-300, 1e-200))
def test_huge_values_with_tiny_budget_become_exact_exceptions(x, eps):
    _check_bound(x, make_grid(eps, None, x.dtype))


@given(hnp.arrays(np.int16, st.integers(1, 200)), st.floats(0.1, 1000))
def test_integer_channels_lossy(x, eps):
    _check_bound(x, make_grid(eps, 0, x.dtype))


@given(hnp.arrays(np.int64, st.integers(1, 200), elements=st.integers(-2**62, 2**62)))
def test_integer_channels_lossless(x):
    g = make_grid(0.0, 0, x.dtype)
    q, pos, bits = quantize(x, g)
    assert np.array_equal(g.dequantize(q, pos, bits), x)


@given(st.lists(st.integers(-10**7, 10**7), min_size=1, max_size=200), st.integers(0, 6))
def test_decimal_grid_lossless_is_bit_exact(ints, d):
    # Values as a logger writes them: the correctly rounded double of a decimal string
    # (Python's float() of "%.{d}f" text; IEEE-754 round-to-nearest).
    x = np.array([float(f"{i / 10**d:.{d}f}") for i in ints])
    g = make_grid(0.0, d, x.dtype)
    q, pos, bits = quantize(x, g)
    assert len(pos) == 0 or np.all(x[pos] == 0)  # only -0.0/+0.0 sign issues may need exceptions
    assert np.array_equal(values_to_bits(g.dequantize(q, pos, bits)), values_to_bits(x))


def test_constant_channel_without_grid_is_exact():
    x = np.full(1000, np.pi)
    g = make_grid(0.0, None, x.dtype, anchor=np.pi)
    q, pos, bits = quantize(x, g)
    assert len(pos) == 0 and np.all(q == 0)
    assert np.array_equal(g.dequantize(q, pos, bits), x)


def test_exceptions_keep_integer_sequence_smooth():
    x = np.array([1.0, 2.0, np.nan, np.inf, 5.0])
    g = make_grid(0.5, None, x.dtype)
    q, pos, _ = quantize(x, g)
    assert list(pos) == [2, 3]
    assert q[2] == q[1] and q[3] == q[1]


def test_grid_dict_round_trip():
    g = make_grid(0.01, None, np.dtype("float32"), anchor=3.0)
    assert Grid.from_dict(g.to_dict()) == g


@pytest.mark.parametrize("eps", [1e-3, 0.1])
def test_error_is_actually_used(eps):
    # the quantizer is not secretly lossless: errors spread over (-eps, eps]
    x = np.random.default_rng(1).uniform(-1, 1, 10000)
    g = make_grid(eps, None, x.dtype)
    q, pos, bits = quantize(x, g)
    err = g.dequantize(q, pos, bits) - x
    assert np.abs(err).max() > 0.9 * eps


def test_int_channel_held_in_a_float64_table_is_lossless():
    # CSV tables with mixed columns are held as float64; an int64 channel must still be exact.
    x = np.array([501.0, 504.0, -3.0, 2.0**40])
    g = make_grid(0.0, 0, np.dtype("int64"))
    q, pos, bits = quantize(x, g)
    assert len(pos) == 0
    assert g.dequantize(q, pos, bits).tolist() == [501, 504, -3, 2**40]


@given(hnp.arrays(np.int32, st.integers(1, 300), elements=st.integers(-10**6, 10**6)),
       st.floats(0.0, 50.0))
def test_integer_channels_decode_to_integers_within_budget_without_exceptions(x, eps):
    # Integers grouped in bins of 2m+1 consecutive values (m = floor(eps)) centred on an integer: the largest
    # distance to the centre is m <= eps (arithmetic), so nothing needs storing verbatim.
    g = make_grid(eps, 0, np.dtype(np.int32), anchor=float(x[0]))
    q, pos, bits = quantize(x, g)
    xh = g.dequantize(q, pos, bits)
    assert len(pos) == 0 and xh.dtype == np.int32
    err = np.abs(xh.astype(np.int64) - x.astype(np.int64))
    assert err.max() <= np.floor(eps)
    if eps < 1:
        assert g.kind == "decimal" and err.max() == 0       # no two integers can share a value: exact
    else:
        assert g.step == 2 * np.floor(eps) + 1


@given(hnp.arrays(np.int64, st.integers(1, 200), elements=st.integers(-10**9, 10**9)),
       st.integers(0, 6), st.sampled_from([1, 2, 5, 25, 125]))
def test_decimal_grid_with_a_multiplier_gives_back_the_parsed_doubles(k, decimals, mult):
    # x = the double nearest to (k * mult) / 10**d, as a decimal parser returns it (IEEE 754 division is
    # correctly rounded; k * mult is exact below 2**53): the grid must return those very bits.
    x = (k * mult).astype(np.float64) / 10.0 ** decimals
    g = make_grid(0.0, decimals, np.dtype(np.float64), mult=mult)
    q, pos, bits = quantize(x, g)
    assert len(pos) == 0
    np.testing.assert_array_equal(q, k)
    np.testing.assert_array_equal(values_to_bits(g.dequantize(q, pos, bits)), values_to_bits(x))
    assert Grid.from_dict(g.to_dict()) == g


# --- the scaled grid (format 8): x = (digital + offset) * step, an EDF reader's arithmetic -----------------


@given(st.floats(-1e4, 1e4), st.floats(1e-3, 1e4), st.sampled_from([(-32768, 32767), (-2048, 2047), (0, 4095),
                                                                   (-8388608, 8388607)]),
       st.lists(st.floats(0, 1), min_size=1, max_size=60))
def test_a_scaled_grid_gives_back_an_edf_reader_s_values_bit_for_bit(pmin, width, digital_range, picks):
    # Reference: EDFlib's conversion as pyedflib computes it (bitvalue = (pmax - pmin) / (dmax - dmin),
    # offset = pmax / bitvalue - dmax, value = bitvalue * (offset + digital)), done here in numpy.
    dmin, dmax = digital_range
    pmax = pmin + width
    bitvalue = (pmax - pmin) / (dmax - dmin)
    offset = pmax / bitvalue - dmax
    digital = np.array([dmin + round(p * (dmax - dmin)) for p in picks], dtype=np.float64)
    x = (digital + offset) * bitvalue
    grid = make_grid(0.0, None, np.float64, scaled=(bitvalue, offset))
    assert grid.kind == "scaled"
    q, pos, bits = quantize(x, grid)
    assert len(pos) == 0                                     # every value on the grid, none kept verbatim
    assert np.array_equal(grid.decode(q).view(np.uint64), x.view(np.uint64))
    assert np.array_equal(q, digital.astype(np.int64))       # the file's own integers


def test_a_scaled_grid_is_lossless_only_and_a_coarser_budget_takes_a_step_grid():
    assert make_grid(0.004, None, np.float64, scaled=(0.01, 0.5)).kind == "scaled"   # below half a step: exact
    assert make_grid(0.02, None, np.float64, scaled=(0.01, 0.5)).kind == "step"
    with pytest.raises(Exception, match="exact only"):
        Grid("scaled", 0.1, "float64", step=0.01, offset=0.5)
    with pytest.raises(Exception, match="positive and finite"):
        Grid("scaled", 0.0, "float64", step=float("nan"), offset=0.5)


# --- the ordered grid (format 8): lossless float32 / float16 -----------------------------------------------


@given(hnp.arrays(np.float32, st.integers(1, 200), elements=st.floats(width=32, allow_nan=False)))
def test_the_ordered_grid_s_integers_follow_ieee_total_order(x):
    # Reference: IEEE 754-2008 section 5.10 totalOrder on non-NaN floats: -0.0 before +0.0, then by value;
    # numpy's sort with -0.0/+0.0 split by the sign bit (np.signbit) is that order.
    from tsarchive.quantize import ordered_ints
    key = np.lexsort((~np.signbit(x), x))           # by value, then -0.0 before +0.0
    s = x[key]
    q = ordered_ints(s, "float32")
    same = s.view(np.uint32)[1:] == s.view(np.uint32)[:-1]
    assert np.all((np.diff(q) > 0) | same)


@pytest.mark.parametrize("dtype", ["float32", "float16"])
def test_the_ordered_grid_gives_back_every_float_bit_for_bit(dtype):
    # every bit pattern of float16, and float32 patterns with NaN payloads, infinities, -0.0 and subnormals;
    # compared on the raw bits (numpy views), the IEEE 754 interchange encoding
    if dtype == "float16":
        x = np.arange(1 << 16, dtype=np.uint32).astype(np.uint16).view(np.float16)
    else:
        bits = np.random.default_rng(3).integers(0, 1 << 32, 50_000, dtype=np.uint64).astype(np.uint32)
        special = np.array([0x00000000, 0x80000000, 0x7F800000, 0xFF800000, 0x7FC00001, 0xFFFFFFFF, 0x00000001,
                            0x807FFFFF, 0x7F7FFFFF], dtype=np.uint32)
        x = np.concatenate([bits, special]).view(np.float32)
    grid = Grid("ordered", 0.0, dtype)
    q, pos, bits_kept = quantize(x, grid)
    assert len(pos) == 0 and q.dtype == np.int64
    assert np.array_equal(grid.dequantize(q, pos, bits_kept).view(f"u{x.itemsize}"), x.view(f"u{x.itemsize}"))


def test_an_ordered_grid_read_from_a_manifest_must_be_exact_and_hold_float32_or_float16():
    # a manifest's grid is checked before any decoding: damage (ArchiveCorrupt), in one line
    from tsarchive.errors import ArchiveCorrupt
    with pytest.raises(ArchiveCorrupt, match="float32 or float16 samples, not float64"):
        Grid.from_dict({"kind": "ordered", "eps": 0.0, "out_dtype": "float64", "step": 1.0, "offset": 0.0,
                        "decimals": 0})
    with pytest.raises(ArchiveCorrupt, match="exact only"):
        Grid.from_dict({"kind": "ordered", "eps": 0.5, "out_dtype": "float32", "step": 1.0, "offset": 0.0,
                        "decimals": 0})
