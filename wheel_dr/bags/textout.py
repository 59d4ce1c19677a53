"""Fast text for large numeric tables (trajectory CSV and TUM files) built with numpy.

Python's per-number formatting dominates writing a one-hour trajectory, so numbers are laid out as
ASCII bytes by array arithmetic, exactly as C's ``printf("%.9e")`` and Python's ``f"{x:.9e}"``
print them: floats in scientific notation with ``SIG_DIGITS`` significant digits
(``3.494150237e-03``, ``-1.234567890e+02``; a sign only when negative, an exponent of at least two
digits), stamps as ``seconds.nanoseconds`` exactly, 0/1 flags as one character. Fields are laid out
in fixed-width byte arrays in which ``FILL`` (a NUL byte) pads the unused places; ``join_fields``
drops the fill in one pass. The rare values whose last digit sits on a rounding tie within float
round-off are formatted by Python itself, so every field is what ``f"{x:.9e}"`` gives.
Non-finite values are written as Python writes them (``nan``, ``inf``, ``-inf``).
"""
from __future__ import annotations

from typing import Sequence

import numpy as np

__all__ = ["float_field", "stamp_field", "flag_field", "join_fields", "SIG_DIGITS", "FILL"]

SIG_DIGITS = 10
FILL = 0                      # pad byte of the fixed-width fields, removed by join_fields
_ZERO = ord("0")
_TIE = 1e-4                   # |fraction - 0.5| below this: the rounding is decided by Python


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


def _python_field(values: np.ndarray, sig: int) -> np.ndarray:
    text = [format(float(x), f".{sig - 1}e") for x in values]
    width = max((len(s) for s in text), default=1)
    out = np.full((len(text), width), FILL, dtype=np.uint8)
    for k, s in enumerate(text):
        out[k, width - len(s):] = np.frombuffer(s.encode("ascii"), dtype=np.uint8)
    return out


def float_field(values: np.ndarray, sig: int = SIG_DIGITS) -> np.ndarray:
    """(N, W) uint8 ASCII of ``values`` as ``f"{x:.{sig-1}e}"`` prints them once the FILL bytes are
    dropped (``join_fields`` does): W = sig + 7 places, FILL where a positive number has no sign and
    where an exponent below 100 has no third digit."""
    v = np.asarray(values, dtype=np.float64)
    n = len(v)
    if not np.isfinite(v).all():
        return _python_field(v, sig)
    a = np.abs(v)
    pos = a > 0
    exp = np.zeros(n, dtype=np.int64)
    exp[pos] = np.floor(np.log10(a[pos])).astype(np.int64)
    top = 10 ** (sig - 1)
    scaled = _scaled(a, (sig - 1) - exp)
    mant = np.rint(scaled).astype(np.int64)
    tie = np.abs(scaled - np.floor(scaled) - 0.5) < _TIE
    # log10 round-off or rounding up to the next power of ten: renormalise
    low = pos & (mant < top)
    exp[low] -= 1
    high = mant >= 10 * top
    exp[high] += 1
    redo = low | high
    if redo.any():
        scaled[redo] = _scaled(a[redo], (sig - 1) - exp[redo])
        mant[redo] = np.rint(scaled[redo]).astype(np.int64)
        tie[redo] |= np.abs(scaled[redo] - np.floor(scaled[redo]) - 0.5) < _TIE
    mant[~pos] = 0
    exp[~pos] = 0
    d = _digits(mant, sig)
    out = np.empty((n, sig + 7), dtype=np.uint8)
    out[:, 0] = np.where(np.signbit(v), ord("-"), FILL)
    out[:, 1] = d[:, 0]
    out[:, 2] = ord(".")
    out[:, 3:sig + 2] = d[:, 1:]
    out[:, sig + 2] = ord("e")
    out[:, sig + 3] = np.where(exp < 0, ord("-"), ord("+"))
    out[:, sig + 4:sig + 7] = _digits(np.abs(exp), 3)
    out[:, sig + 4] = np.where(np.abs(exp) < 100, FILL, out[:, sig + 4])   # two exponent digits below 100
    if tie.any():
        py = _python_field(v[tie], sig)
        out[tie] = FILL
        out[tie, out.shape[1] - py.shape[1]:] = py
    return out


def stamp_field(stamp_ns: np.ndarray) -> np.ndarray:
    """(N, W) uint8 ASCII of nanosecond stamps as exact ``seconds.nanoseconds`` (FILL before short seconds)."""
    st = np.asarray(stamp_ns, dtype=np.int64)
    if (st < 0).any():
        raise ValueError("negative stamps")
    sec, ns = st // 1_000_000_000, st % 1_000_000_000
    width = max(1, len(str(int(sec.max())))) if len(st) else 1
    sd = _digits(sec, width)
    lead = np.cumsum(sd != _ZERO, axis=1) == 0        # leading zeros are dropped (keep the last digit)
    lead[:, -1] = False
    sd[lead] = FILL
    out = np.empty((len(st), width + 10), dtype=np.uint8)
    out[:, :width] = sd
    out[:, width] = ord(".")
    out[:, width + 1:] = _digits(ns, 9)
    return out


def flag_field(flags: np.ndarray) -> np.ndarray:
    """(N, 1) uint8 ASCII '0' / '1'."""
    return (np.asarray(flags, dtype=bool).astype(np.uint8) + _ZERO).reshape(-1, 1)


def join_fields(fields: Sequence[np.ndarray], sep: str = ",") -> bytes:
    """Rows of the fields joined by ``sep``, each row ending in a newline, FILL bytes dropped."""
    n = fields[0].shape[0]
    width = sum(f.shape[1] for f in fields) + len(fields)
    out = np.empty((n, width), dtype=np.uint8)
    col = 0
    for i, f in enumerate(fields):
        out[:, col:col + f.shape[1]] = f
        col += f.shape[1]
        out[:, col] = ord(sep) if i + 1 < len(fields) else ord("\n")
        col += 1
    flat = out.reshape(-1)
    return flat[flat != FILL].tobytes()
