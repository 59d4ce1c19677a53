"""Fast fixed-width text for large numeric tables (trajectory CSV and TUM files) built with numpy.

Python's per-number formatting dominates writing a one-hour trajectory, so numbers are laid out as
ASCII bytes by array arithmetic: floats in scientific notation with ``SIG_DIGITS`` significant
digits (``-1.23456789e+002``; a leading space for positive numbers, exponent always three digits),
stamps as ``seconds.nanoseconds`` exactly, 0/1 flags as one character. Every field parses with
``float()`` and with any CSV reader. Non-finite values fall back to Python's ``repr``.
"""
from __future__ import annotations

from typing import Sequence

import numpy as np

__all__ = ["float_field", "stamp_field", "flag_field", "join_fields", "SIG_DIGITS"]

SIG_DIGITS = 10
_ZERO = ord("0")


# "0000".."9999" as little-endian 4-byte words: one gather per group of four digits
_TABLE32 = np.frombuffer(b"".join(f"{i:04d}".encode() for i in range(10000)), dtype="<u4")


def _digits(values: np.ndarray, count: int) -> np.ndarray:
    """(N, count) ASCII digits of non-negative int64 ``values`` (most significant first, zero-padded)."""
    groups = -(-count // 4)
    v = np.asarray(values, dtype=np.int64)
    words = np.empty((len(v), groups), dtype="<u4")
    for k in range(groups):
        words[:, k] = _TABLE32[(v // 10 ** (4 * (groups - 1 - k))) % 10000]
    return words.view(np.uint8).reshape(len(v), 4 * groups)[:, 4 * groups - count:]


def _scaled(a: np.ndarray, power: np.ndarray) -> np.ndarray:
    """a * 10**power without overflow for the extreme exponents of subnormal numbers."""
    half = power // 2
    return a * np.power(10.0, half) * np.power(10.0, power - half)


def float_field(values: np.ndarray, sig: int = SIG_DIGITS) -> np.ndarray:
    """(N, W) uint8 ASCII of ``values`` in scientific notation (W = sig + 7)."""
    v = np.asarray(values, dtype=np.float64)
    n = len(v)
    if not np.isfinite(v).all():
        text = [repr(float(x)) for x in v]
        width = max(len(t) for t in text) if text else 1
        return np.frombuffer("".join(t.rjust(width) for t in text).encode(), dtype=np.uint8).reshape(n, width).copy()
    a = np.abs(v)
    pos = a > 0
    exp = np.zeros(n, dtype=np.int64)
    exp[pos] = np.floor(np.log10(a[pos])).astype(np.int64)
    top = 10 ** (sig - 1)
    mant = np.rint(_scaled(a, (sig - 1) - exp)).astype(np.int64)
    # log10 round-off or rounding up to the next power of ten: renormalise
    low = pos & (mant < top)
    exp[low] -= 1
    high = mant >= 10 * top
    exp[high] += 1
    redo = low | high
    if redo.any():
        mant[redo] = np.rint(_scaled(a[redo], (sig - 1) - exp[redo])).astype(np.int64)
    mant[~pos] = 0
    exp[~pos] = 0
    d = _digits(mant, sig)
    out = np.empty((n, sig + 7), dtype=np.uint8)
    out[:, 0] = np.where(v < 0, ord("-"), ord(" "))
    out[:, 1] = d[:, 0]
    out[:, 2] = ord(".")
    out[:, 3:sig + 2] = d[:, 1:]
    out[:, sig + 2] = ord("e")
    out[:, sig + 3] = np.where(exp < 0, ord("-"), ord("+"))
    out[:, sig + 4:sig + 7] = _digits(np.abs(exp), 3)
    return out


def stamp_field(stamp_ns: np.ndarray) -> np.ndarray:
    """(N, W) uint8 ASCII of nanosecond stamps as exact ``seconds.nanoseconds`` (seconds right-aligned)."""
    st = np.asarray(stamp_ns, dtype=np.int64)
    if (st < 0).any():
        raise ValueError("negative stamps")
    sec, ns = st // 1_000_000_000, st % 1_000_000_000
    width = max(1, len(str(int(sec.max())))) if len(st) else 1
    sd = _digits(sec, width)
    lead = np.cumsum(sd != _ZERO, axis=1) == 0        # leading zeros become spaces (keep the last digit)
    lead[:, -1] = False
    sd[lead] = ord(" ")
    out = np.empty((len(st), width + 10), dtype=np.uint8)
    out[:, :width] = sd
    out[:, width] = ord(".")
    out[:, width + 1:] = _digits(ns, 9)
    return out


def flag_field(flags: np.ndarray) -> np.ndarray:
    """(N, 1) uint8 ASCII '0' / '1'."""
    return (np.asarray(flags, dtype=bool).astype(np.uint8) + _ZERO).reshape(-1, 1)


def join_fields(fields: Sequence[np.ndarray], sep: str = ",") -> bytes:
    """Rows of the fields joined by ``sep``, each row ending in a newline."""
    n = fields[0].shape[0]
    width = sum(f.shape[1] for f in fields) + len(fields)
    out = np.empty((n, width), dtype=np.uint8)
    col = 0
    for i, f in enumerate(fields):
        out[:, col:col + f.shape[1]] = f
        col += f.shape[1]
        out[:, col] = ord(sep) if i + 1 < len(fields) else ord("\n")
        col += 1
    return out.tobytes()
