"""Words and numbers every report format shares: °C conversion, verdict line, cautions.

Input: a :class:`~boardheat.checks.CheckResult` (SI units, kelvin). Output: display strings.
Absolute temperatures are shown in °C (``T_c = T_K - 273.15``); temperature differences
(margins, rises) are the same in K and °C and stay in K. No physics is done here.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np
import numpy.typing as npt

from boardheat.checks import CheckResult, PartResult, SanityCheck

FloatArray = npt.NDArray[np.float64]

#: 0 °C in kelvin
ZERO_CELSIUS = 273.15

#: the caution every report carries, one sentence per item
CAUTIONS: tuple[str, ...] = (
    "These results are engineering estimates from a model; confirm them by measurement "
    "on hardware before relying on them.",
    "Hot surfaces can burn, and overheated parts can fail or ignite.",
    "Follow the safety standards and local codes that apply to the product, and licensed "
    "practice; they take precedence over this report.",
)

#: the same caution as one line, for the terminal
CAUTION_LINE = (
    "Caution: model estimate, confirm by measurement on hardware. Hot surfaces can burn and "
    "overheated parts can fail or ignite; follow the applicable safety standards, local codes "
    "and licensed practice."
)

#: display names of the run statistics, in display order; other keys follow alphabetically
STAT_LABELS: dict[str, str] = {
    "dofs": "degrees of freedom",
    "nodes_2d": "mesh nodes (2D)",
    "triangles": "mesh triangles",
    "layers_z": "through-thickness nodes",
    "steps": "time steps",
    "rejected": "rejected steps",
    "factorizations": "factorizations",
    "solves": "linear solves",
    "backend": "linear solver",
    "precision": "factorization precision",
    "seconds_mesh": "meshing, s",
    "seconds_assembly": "assembly, s",
    "seconds_steady": "steady solve, s",
    "seconds_factor": "factorizing, s",
    "seconds_solve": "solving, s",
    "seconds_stepping": "time stepping, s",
    "seconds_total": "total, s",
}


def to_celsius(kelvin: float) -> float:
    """Return a temperature in °C from kelvin.

    >>> to_celsius(373.15)
    100.0
    """
    return float(kelvin) - ZERO_CELSIUS


def array_to_celsius(kelvin: FloatArray) -> FloatArray:
    """Return temperatures in °C, same shape as ``kelvin`` (any shape, K)."""
    out: FloatArray = np.asarray(kelvin, dtype=np.float64) - ZERO_CELSIUS
    return out


def fmt_c(kelvin: float | None, digits: int = 1) -> str:
    """Return an absolute temperature in °C with ``digits`` decimals, or a dash for None.

    >>> fmt_c(398.15), fmt_c(None)
    ('125.0', '—')
    """
    if kelvin is None:
        return "—"
    return f"{to_celsius(kelvin):.{digits}f}"


def fmt_k(delta: float, digits: int = 1, sign: bool = False) -> str:
    """Return a temperature difference in K with ``digits`` decimals.

    >>> fmt_k(-3.14159), fmt_k(2.0, sign=True)
    ('-3.1', '+2.0')
    """
    return f"{delta:+.{digits}f}" if sign else f"{delta:.{digits}f}"


def fmt_s(seconds: float) -> str:
    """Return a time with a unit chosen for reading (µs, ms, s), 3-4 significant digits.

    >>> fmt_s(0.0), fmt_s(2.5e-3), fmt_s(12.25), fmt_s(3.0e-6)
    ('0 s', '2.5 ms', '12.25 s', '3 µs')
    """
    if not math.isfinite(seconds):
        return f"{seconds} s"
    a = abs(seconds)
    if a == 0.0 or a >= 1.0:
        return f"{seconds:.4g} s"
    if a >= 1e-3:
        return f"{seconds * 1e3:.4g} ms"
    return f"{seconds * 1e6:.4g} µs"


def fmt_num(x: float) -> str:
    """Return a number with 4 significant digits.

    >>> fmt_num(0.123456), fmt_num(12345.0)
    ('0.1235', '1.234e+04')
    """
    return f"{x:.4g}"


def fmt_tolerance(tolerance: float) -> str:
    """Return a relative tolerance as a percentage, or a dash when the check is informational.

    >>> fmt_tolerance(0.15), fmt_tolerance(0.0)
    ('±15%', '—')
    """
    return f"±{tolerance * 100:.3g}%" if tolerance > 0 else "—"


def plural(n: int, word: str) -> str:
    """Return ``n word`` with an English plural s.

    >>> plural(1, "part"), plural(3, "part")
    ('1 part', '3 parts')
    """
    return f"{n} {word}{'' if n == 1 else 's'}"


def critical_part(parts: Sequence[PartResult]) -> PartResult | None:
    """Return the part with the smallest margin (first on a tie), or None without parts."""
    if not parts:
        return None
    return min(parts, key=lambda p: p.margin)


def verdict_line(result: CheckResult) -> str:
    """Return the one-line verdict, e.g. ``FAIL — 1 of 3 parts exceed their Tj max ...``."""
    parts = result.parts
    n = len(parts)
    over = [p for p in parts if p.status == "FAIL"]
    near = [p for p in parts if p.status == "NEAR"]
    lam = result.laminate
    pieces: list[str] = []
    if over:
        worst = ", ".join(f"{p.refdes} by {fmt_k(-p.margin)} K" for p in over[:3])
        more = f" and {len(over) - 3} more" if len(over) > 3 else ""
        verb = "exceeds its" if len(over) == 1 else "exceed their"
        pieces.append(f"{len(over)} of {plural(n, 'part')} {verb} Tj max ({worst}{more})")
    elif n:
        crit = critical_part(parts)
        assert crit is not None
        pieces.append(
            f"all {plural(n, 'part')} within Tj max, smallest margin {fmt_k(crit.margin)} K "
            f"at {crit.refdes}"
        )
    else:
        pieces.append("no parts to check")
    if near:
        names = ", ".join(p.refdes for p in near[:5]) + (" ..." if len(near) > 5 else "")
        pieces.append(f"{len(near)} within the {fmt_k(result.margin)} K warning band ({names})")
    if lam.status == "FAIL":
        pieces.append(f"laminate over its limit ({fmt_c(lam.peak)} °C > {fmt_c(lam.limit)} °C)")
    elif lam.status == "NEAR":
        pieces.append(
            f"laminate within {fmt_k(result.margin)} K of its limit "
            f"({fmt_c(lam.peak)} °C, limit {fmt_c(lam.limit)} °C)"
        )
    return f"{result.verdict} — " + "; ".join(pieces)


def laminate_line(result: CheckResult) -> str:
    """Return one line on the hottest board point against the laminate limit."""
    lam = result.laminate
    return (
        f"hottest board point {fmt_c(lam.peak)} °C at {fmt_s(lam.time)}; laminate limit "
        f"{fmt_c(lam.limit)} °C; margin {fmt_k(lam.limit - lam.peak)} K — {lam.status}"
    )


def sanity_result(check: SanityCheck) -> str:
    """Return ``ok`` or ``DISAGREES`` for a sanity check."""
    return "ok" if check.passed else "DISAGREES"


def stat_items(stats: Mapping[str, float | int | str]) -> list[tuple[str, str]]:
    """Return (label, value) pairs of the run statistics in display order.

    >>> stat_items({"zeta": 1, "seconds_total": 2.345678, "dofs": 1200})
    [('degrees of freedom', '1200'), ('total, s', '2.346'), ('zeta', '1')]
    """
    keys = [k for k in STAT_LABELS if k in stats]
    keys += sorted(k for k in stats if k not in STAT_LABELS)
    out = []
    for key in keys:
        value = stats[key]
        text = f"{value:.4g}" if isinstance(value, float) else str(value)
        out.append((STAT_LABELS.get(key, key), text))
    return out


def stats_line(stats: Mapping[str, float | int | str]) -> str:
    """Return a one-line summary of the solver effort, or an empty string without stats.

    >>> stats_line({"dofs": 5000, "steps": 120, "rejected": 3, "factorizations": 6,
    ...             "seconds_total": 4.56})
    'run: 5000 DOFs, 120 steps (3 rejected), 6 factorizations, 4.56 s'
    """
    bits = []
    if "dofs" in stats:
        bits.append(f"{stats['dofs']} DOFs")
    if "steps" in stats:
        rej = f" ({stats['rejected']} rejected)" if "rejected" in stats else ""
        bits.append(f"{stats['steps']} steps{rej}")
    if "factorizations" in stats:
        bits.append(f"{stats['factorizations']} factorizations")
    total = stats.get("seconds_total")
    if isinstance(total, int | float):
        bits.append(f"{total:.3g} s")
    return "run: " + ", ".join(bits) if bits else ""


def analysis_line(result: CheckResult) -> str:
    """Return the kind of analysis, ambient and warning band in one line."""
    kind = "steady state" if result.steady else f"transient over {fmt_s(result.duration)}"
    return (
        f"{kind}; ambient {fmt_c(result.ambient)} °C; NEAR band {fmt_k(result.margin)} K "
        f"below each limit"
    )
