"""Digests of what a baseline records: allocations at fixed significant digits, instances, files."""

from __future__ import annotations

import hashlib
import math

import numpy as np

from ..instance import Instance

SIG_DIGITS = 6          # significant digits of the allocation digest
ZERO_SEATS = 1e-8       # allocation entries below this many seats count as 0 in the digest

# --------------------------------------------------------------------------- digests and numbers
def sha256_bytes(b: bytes) -> str:
    return hashlib.sha256(b).hexdigest()


def round_significant(x, digits: int = SIG_DIGITS):
    """(mantissa, exponent) int64 arrays with x ~= mantissa * 10**(exponent - digits + 1).

    ``|mantissa|`` has exactly ``digits`` digits (0 for zero, with exponent 0);
    entries below :data:`ZERO_SEATS` in magnitude are taken as 0.
    """
    x = np.asarray(x, dtype=np.float64)
    if not np.all(np.isfinite(x)):
        raise ValueError("allocation has non-finite entries")
    ax = np.abs(x)
    nz = ax >= ZERO_SEATS
    e = np.zeros(x.shape, dtype=np.int64)
    e[nz] = np.floor(np.log10(ax[nz])).astype(np.int64)
    m = np.where(nz, np.rint(x / np.power(10.0, (e - (digits - 1)).astype(np.float64))), 0.0)
    over = np.abs(m) >= 10.0 ** digits           # 9.9999996 rounds up to 10.00000
    m[over] = np.rint(m[over] / 10.0)
    e[over] += 1
    under = nz & (np.abs(m) < 10.0 ** (digits - 1))  # log10 just below an integer
    m[under] = np.rint(x[under] / np.power(10.0, (e[under] - digits).astype(np.float64)))
    e[under] -= 1
    return m.astype(np.int64), e


def allocation_digest(x, digits: int = SIG_DIGITS) -> dict:
    """sha256 of the allocation rounded to ``digits`` significant digits, with its sum/min/max.

    The hash covers the text header ``decomp-allocation;sig=<digits>;n=<n>;``
    followed by the little-endian int64 mantissas, then the int64 exponents, of
    :func:`round_significant`.
    """
    if x is None:
        return {"sha256": None, "significant_digits": digits, "n": 0, "sum": None, "min": None, "max": None}
    x = np.asarray(x, dtype=np.float64)
    m, e = round_significant(x, digits)
    h = hashlib.sha256(f"decomp-allocation;sig={digits};n={len(x)};".encode())
    h.update(m.astype("<i8").tobytes())
    h.update(e.astype("<i8").tobytes())
    return {"sha256": h.hexdigest(), "significant_digits": digits, "zero_below": ZERO_SEATS, "n": int(len(x)),
            "sum": float(x.sum()) if len(x) else 0.0,
            "min": float(x.min()) if len(x) else None, "max": float(x.max()) if len(x) else None}


def instance_fingerprint(inst: Instance) -> str:
    """sha256 over the instance's ids, network and forecasts (what the solvers see)."""
    h = hashlib.sha256(b"decomp-instance;")
    for ids in (inst.leg_ids, inst.product_ids):
        h.update(("\x1f".join(str(v) for v in ids.tolist()) + "\x1e").encode())
    for arr in (inst.capacity, inst.fare, inst.mean, inst.std):
        h.update(np.ascontiguousarray(arr, dtype="<f8").tobytes())
    for arr in (inst.leg_ptr, inst.leg_index):
        h.update(np.ascontiguousarray(arr, dtype="<i8").tobytes())
    h.update(("\x1f".join(str(v) for v in inst.distributions().tolist())).encode())
    return h.hexdigest()


def _num(v):
    """A JSON-safe float (non-finite values as the strings 'inf', '-inf', 'nan')."""
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else str(v)


def optional_float(v):
    if v is None:
        return None
    return float(v)
