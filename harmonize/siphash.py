"""SipHash-2-4 of short messages, vectorised with numpy (one message per array element).

SipHash is the keyed hash pandas uses for text (`pandas.util.hash_array`); record ids hash row
numbers as decimal text. Python would make a string object per row to hash it; here each
number's digits are placed straight into the two 64-bit words its text would fill, and the
rounds run in place on whole arrays.
Reference: J.-P. Aumasson and D. J. Bernstein, "SipHash: a fast short-input PRF" (2012).
"""

from __future__ import annotations

import numpy as np

_U64 = np.uint64
# the decimal text of a number up to this fits in two 8-byte words (15 digits)
MAX_DECIMAL = 10**15 - 1


def key_words(key: bytes) -> tuple[int, int]:
    """The 16-byte key as its two little-endian 64-bit words (k0, k1)."""
    if len(key) != 16:
        raise ValueError("a SipHash key has 16 bytes")
    return int.from_bytes(key[:8], "little"), int.from_bytes(key[8:], "little")


def _rounds(v: list[np.ndarray], count: int) -> None:
    """SipRounds in place (rotations through one scratch array, no temporaries)."""
    v0, v1, v2, v3 = v
    scratch = np.empty_like(v0)

    def rotate(x: np.ndarray, bits: int) -> None:
        np.left_shift(x, _U64(bits), out=scratch)
        np.right_shift(x, _U64(64 - bits), out=x)
        x |= scratch

    for _ in range(count):
        v0 += v1
        rotate(v1, 13)
        v1 ^= v0
        rotate(v0, 32)
        v2 += v3
        rotate(v3, 16)
        v3 ^= v2
        v0 += v3
        rotate(v3, 21)
        v3 ^= v0
        v2 += v1
        rotate(v1, 17)
        v1 ^= v2
        rotate(v2, 32)


def siphash24(key: tuple[int, int], blocks: list[np.ndarray], last: np.ndarray) -> np.ndarray:
    """SipHash-2-4 per element, for messages of equal block count: `blocks` are their full
    8-byte words (little-endian, uint64 arrays), `last` the final word (the remaining bytes,
    with the message length mod 256 in its top byte)."""
    count = len(last)
    k0, k1 = (_U64(k) for k in key)
    v = [
        np.full(count, k0 ^ _U64(0x736F6D6570736575), dtype=_U64),
        np.full(count, k1 ^ _U64(0x646F72616E646F6D), dtype=_U64),
        np.full(count, k0 ^ _U64(0x6C7967656E657261), dtype=_U64),
        np.full(count, k1 ^ _U64(0x7465646279746573), dtype=_U64),
    ]
    for block in [*blocks, last]:
        v[3] ^= block
        _rounds(v, 2)
        v[0] ^= block
    v[2] ^= _U64(0xFF)
    _rounds(v, 4)
    return v[0] ^ v[1] ^ v[2] ^ v[3]


def fits_decimal(values: np.ndarray) -> bool:
    """Whether every number's decimal text has at most 15 characters (see `decimal_siphash`)."""
    values = np.asarray(values)
    if values.dtype.kind not in "iu":
        return False
    return not len(values) or (int(values.max()) <= MAX_DECIMAL and int(values.min()) > -(10**14))


def decimal_siphash(values: np.ndarray, key: tuple[int, int]) -> np.ndarray:
    """SipHash-2-4 of each integer's decimal text (ASCII digits, '-' before a negative one),
    for texts of at most 15 characters (`fits_decimal`)."""
    if not fits_decimal(values):
        raise ValueError("decimal_siphash takes integers of at most 15 characters")
    values = np.asarray(values, dtype=np.int64)
    out = np.empty(len(values), dtype=_U64)
    for start in range(0, len(values), _CHUNK):
        out[start : start + _CHUNK] = _decimal_chunk(values[start : start + _CHUNK], key)
    return out


_CHUNK = 1 << 16  # numbers hashed at once: arrays small enough to stay in cache
_POWERS = 10 ** np.arange(1, 16, dtype=np.int64)  # 10 .. 10**15


def _decimal_chunk(values: np.ndarray, key: tuple[int, int]) -> np.ndarray:
    words, length = _decimal_words(values)
    tail = length.astype(_U64) << _U64(56)
    short = length < 8
    if short.all():  # the usual case: row numbers below 10 million
        return siphash24(key, [], words[0] | tail)
    out = np.empty(len(values), dtype=_U64)
    out[short] = siphash24(key, [], words[0][short] | tail[short])
    long = ~short
    out[long] = siphash24(key, [words[0][long]], words[1][long] | tail[long])
    return out


def _decimal_words(values: np.ndarray) -> tuple[list[np.ndarray], np.ndarray]:
    """Each number's decimal text as two little-endian 64-bit words (bytes past the text
    zero), and the text's length. Digits are taken by division, right to left, and placed
    at their byte; no text is made."""
    negative = values < 0
    rest = np.abs(values)
    digits = np.searchsorted(_POWERS, rest, side="right") + 1
    length = digits + negative
    words = [np.where(negative, _U64(ord("-")), _U64(0)), np.zeros(len(values), dtype=_U64)]
    second = len(values) and int(length.max()) > 8  # any text reaching the second word
    place = length - 1  # the byte of the current digit, from the text's start
    for k in range(int(digits.max()) if len(values) else 0):
        rest, digit = np.divmod(rest, 10)
        char = (digit + ord("0")).astype(_U64)
        char[digits <= k] = 0  # past the number's first digit: no byte
        first = place < 8
        words[0] |= np.where(first, char, _U64(0)) << (np.clip(place, 0, 7) * 8).astype(_U64)
        if second:
            shift = (np.clip(place - 8, 0, 7) * 8).astype(_U64)
            words[1] |= np.where(first, _U64(0), char) << shift
        place -= 1
    return words, length
