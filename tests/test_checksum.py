"""Checksums against published check values and the Python standard library."""

from __future__ import annotations

import hashlib
import struct
import zlib

import numpy as np
import pytest

from tsarchive.checksum import CHUNK_BYTES, bytes_crc, file_sha256, window_crc
from tsarchive.errors import BadInput, SourceNotFound

# CRC RevEng catalogue, "CRC-32/ISO-HDLC" (the zlib / IEEE 802.3 CRC): check = 0xCBF43926,
# the CRC of the ASCII string "123456789".
CRC32_CHECK = 0xCBF43926

# FIPS 180-2, Appendix B.1 / B.2 / B.3 (SHA-256 examples).
SHA256_ABC = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
SHA256_TWO_BLOCK = "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1"
SHA256_MILLION_A = "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0"


def test_bytes_crc_check_value():
    assert bytes_crc(b"123456789") == CRC32_CHECK  # CRC RevEng catalogue, CRC-32/ISO-HDLC


def test_bytes_crc_continues_across_pieces():
    assert bytes_crc(b"6789", bytes_crc(b"12345")) == CRC32_CHECK  # same check value, split input


def test_window_crc_of_byte_array_is_the_check_value():
    a = np.frombuffer(b"123456789", dtype=np.uint8)
    assert window_crc(a) == CRC32_CHECK  # CRC RevEng catalogue, CRC-32/ISO-HDLC


def test_window_crc_is_crc_of_little_endian_bytes():
    values = [0, 1, -1, 2**63 - 1, -(2**63), 123456789]
    # definition: little-endian 8-byte two's complement, built with int.to_bytes (not numpy)
    expected = zlib.crc32(b"".join(v.to_bytes(8, "little", signed=True) for v in values))
    assert window_crc(np.array(values, dtype="<i8")) == expected
    assert window_crc(np.array(values, dtype=">i8")) == expected  # byte order of the array does not matter


def test_window_crc_ignores_memory_layout():
    a = np.arange(24, dtype=np.int64).reshape(4, 6)
    view = a[:, ::2]
    assert not view.flags.c_contiguous
    assert window_crc(view) == zlib.crc32(np.ascontiguousarray(view).tobytes())  # zlib reference


def test_window_crc_of_float_uses_ieee_bytes():
    x = np.array([1.0, -2.5, np.inf], dtype=">f8")
    # struct's "<d" is the IEEE 754 binary64 little-endian layout (Python standard library)
    assert window_crc(x) == zlib.crc32(b"".join(struct.pack("<d", v) for v in x.tolist()))


def test_window_crc_rejects_objects():
    with pytest.raises(BadInput):
        window_crc(np.array(["a", "b"], dtype=object))


def test_window_crc_detects_a_single_flipped_bit():
    a = np.arange(512, dtype=np.int64)
    b = a.copy()
    b[300] ^= 1 << 17
    assert window_crc(a) != window_crc(b)  # CRC-32 detects every single-bit error (common practice (no source))


@pytest.mark.parametrize("payload, expected", [
    (b"abc", SHA256_ABC),                                                          # FIPS 180-2 B.1
    (b"abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq", SHA256_TWO_BLOCK),  # FIPS 180-2 B.2
    (b"a" * 1_000_000, SHA256_MILLION_A),                                          # FIPS 180-2 B.3
])
def test_file_sha256_published_vectors(tmp_path, payload, expected):
    p = tmp_path / "f.bin"
    p.write_bytes(payload)
    assert file_sha256(p) == expected


def test_file_sha256_streams_across_chunk_boundaries(tmp_path):
    data = np.random.default_rng(5).integers(0, 256, 3 * CHUNK_BYTES + 17, dtype=np.uint8).tobytes()
    p = tmp_path / "big.bin"
    p.write_bytes(data)
    assert file_sha256(str(p)) == hashlib.sha256(data).hexdigest()  # hashlib reference


def test_file_sha256_missing_file(tmp_path):
    with pytest.raises(SourceNotFound):
        file_sha256(tmp_path / "nope.bin")
