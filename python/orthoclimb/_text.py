"""Numbers for people, shared by the command line and the library's own messages (no heavy
imports: the command line's entry module imports this)."""

from __future__ import annotations

__all__ = ["format_bytes", "seconds_text"]


def seconds_text(seconds: float) -> str:
    """A duration for people: "850 ms", "3.2 s", "42 s", "7 min", "2.5 h", "12 days",
    "3.4 years", "2.1e+08 years" (a plan for a size far beyond the machine reads as that)."""
    import math

    if not (math.isfinite(seconds) and seconds >= 0.0):
        return "unknown"
    if seconds < 0.9995e-3:
        return f"{seconds * 1e6:.0f} us"
    if seconds < 0.9995:
        return f"{seconds * 1e3:.0f} ms"
    if seconds < 9.95:
        return f"{seconds:.1f} s"
    if seconds < 99.5:
        return f"{seconds:.0f} s"
    if seconds < 5970:
        return f"{seconds / 60:.0f} min"
    if seconds < 71.95 * 3600:
        return f"{seconds / 3600:.1f} h"
    days = seconds / 86400
    if days < 729.5:
        return f"{days:.0f} days"
    years = days / 365.25
    return f"{years:.1f} years" if years < 9999.5 else f"{years:.1e} years"


def format_bytes(nbytes: float) -> str:
    """Human-readable size: '1.5 GiB'; past 1024 EiB in powers of ten: '5.2e+22 bytes';
    'unknown' for NaN or infinity."""
    import math

    value = float(nbytes)
    if not math.isfinite(value):
        return "unknown"
    # a unit holds what rounds to below 1024 of it: 1023.6 B is "1.0 KiB", not "1024 B"
    if abs(value) < 1023.5:
        return f"{value:.0f} B"
    for unit in ("KiB", "MiB", "GiB", "TiB", "PiB", "EiB"):
        value /= 1024
        if abs(value) < 1023.95:
            return f"{value:.1f} {unit}"
    return f"{float(nbytes):.1e} bytes"
