"""Junction thermal networks: Cauer ladders, Foster networks and the exact conversion between them.

Stage 7 of the data flow. Input: the ``junction`` table of one part in the parsed board file.
Output: a :class:`CauerLadder` (or a :class:`FosterNetwork`, which :func:`foster_to_cauer` turns
into one) whose nodes the assembly stage adds to the finite-element system as extra unknowns.
A ladder of ``n`` nodes obeys ``C T' + G T = e_0 P(t) + g_out T_board e_{n-1}``, where ``T`` are the
node temperatures (node 0 is the junction), ``C = diag(C_i)`` and ``G`` the tridiagonal conductance
matrix of :func:`ladder_matrices`. A datasheet Foster network is the partial-fraction form
``Z(s) = sum_i R_i / (1 + s tau_i)`` of the same driving-point impedance; it is converted to the
ladder by Cauer's continued-fraction expansion, done in exact rational arithmetic.

References (all recalled from memory, not re-checked against the printed sources):

- W. Cauer, "Die Verwirklichung von Wechselstromwiderständen vorgeschriebener
  Frequenzabhängigkeit", Archiv für Elektrotechnik 17 (1926): continued-fraction synthesis
  of RC driving-point functions as ladders (Cauer's first form, expansion at s = infinity).
- E. A. Guillemin, "Synthesis of Passive Networks", Wiley (1957), chapters on RC driving-point
  synthesis: an RC impedance with interlacing real poles and zeros expands into a ladder whose
  elements are all positive.
- V. Székely, "A new evaluation method of thermal transient measurement results",
  Microelectronics Journal 28 (1997): Foster-to-Cauer conversion of thermal impedances and its
  need for very high numerical precision; the same transformation underlies the structure
  functions of JEDEC JESD51-14 (2010).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.linalg

from boardheat.errors import BoardFileError

FloatArray = npt.NDArray[np.float64]

#: Largest Foster network accepted. Datasheets print 2 to about 10 terms; the exact
#: conversion of 12 stages still takes only milliseconds, and larger networks would only fit
#: measurement noise.
MAX_FOSTER_STAGES = 12

# Board-file syntax: model name -> (key of the resistances, key of the second quantity, its unit).
_JUNCTION_KEYS: dict[str, tuple[str, str, str]] = {
    "cauer": ("r_k_per_w", "c_j_per_k", "J/K"),
    "foster": ("r_k_per_w", "tau_s", "s"),
}


def _found(value: object) -> str:
    """Describe a found value for an error message, shortened to one readable line."""
    text = repr(value)
    if len(text) > 60:
        text = text[:57] + "..."
    return f"{text} ({type(value).__name__})"


def _positive_vector(values: object, field: str, unit: str) -> FloatArray:
    """Return ``values`` as a read-only 1-D float64 array of positive finite numbers.

    Parameters
    ----------
    values : list, tuple or 1-D ndarray of real numbers
        The values as written (a TOML array, or an array built in code).
    field : str
        Field path used in error messages, e.g. ``"board.toml: part[U3].junction.foster.tau_s"``.
    unit : str
        Unit of the values, quoted in error messages.

    Returns
    -------
    (n,) float ndarray, in ``unit``
        Read-only copy of the values.

    Raises
    ------
    BoardFileError
        If ``values`` is not a non-empty list of positive finite numbers; the message names
        the element, the value found and what was expected.
    """
    if isinstance(values, np.ndarray) and values.ndim == 1:
        items: list[Any] = values.tolist()
    elif isinstance(values, list | tuple):
        items = list(values)
    else:
        raise BoardFileError(
            f"{field}: found {_found(values)}, expected a list of positive numbers in {unit}"
        )
    if not items:
        raise BoardFileError(
            f"{field}: found an empty list, expected at least one positive number in {unit}"
        )
    numbers: list[float] = []
    for i, item in enumerate(items):
        if isinstance(item, bool) or not isinstance(item, int | float):
            raise BoardFileError(
                f"{field}[{i}]: found {_found(item)}, expected a positive number in {unit}"
            )
        try:
            number = float(item)
        except OverflowError as err:
            raise BoardFileError(
                f"{field}[{i}]: found {item!r}, expected a positive number in {unit} "
                "within the float64 range"
            ) from err
        if not (math.isfinite(number) and number > 0.0):
            raise BoardFileError(
                f"{field}[{i}]: found {item!r}, expected a positive finite number in {unit}"
            )
        numbers.append(number)
    array = np.array(numbers, dtype=np.float64)
    array.setflags(write=False)
    return array


def _check_pair(
    first: FloatArray,
    second: FloatArray,
    where: str,
    names: tuple[str, str],
    max_stages: int | None = None,
) -> None:
    """Raise BoardFileError unless both vectors have the same length (at most ``max_stages``)."""
    if first.size != second.size:
        raise BoardFileError(
            f"{where}: found {first.size} values in {names[0]} and {second.size} in {names[1]}, "
            "expected one of each per stage (equal lengths)"
        )
    if max_stages is not None and first.size > max_stages:
        raise BoardFileError(f"{where}: found {first.size} stages, expected 1 to {max_stages}")


@dataclass(frozen=True, eq=False)
class CauerLadder:
    """Junction-outward RC ladder (Cauer network) between the junction and the board.

    Node 0 is the junction. ``R[i]`` joins node ``i`` to node ``i + 1``; ``R[-1]`` joins the last
    node to the board (the part's footprint). ``C[i]`` is node ``i``'s capacity to thermal
    ground. Arrays are validated (equal lengths, positive, finite) and stored read-only;
    instances compare by identity because field-wise ``==`` on arrays is ambiguous.

    Attributes
    ----------
    R : (n,) float ndarray, K/W
        Thermal resistances, junction side first.
    C : (n,) float ndarray, J/K
        Node heat capacities, junction node first.

    Raises
    ------
    BoardFileError
        If the arrays are empty, of unequal length, or hold a non-positive or non-finite value.

    Examples
    --------
    >>> ladder = CauerLadder(R=np.array([0.2, 1.5]), C=np.array([1e-3, 0.05]))
    >>> ladder.stages, ladder.R.flags.writeable
    (2, False)
    """

    R: FloatArray
    C: FloatArray

    def __post_init__(self) -> None:
        R = _positive_vector(self.R, "CauerLadder.R", "K/W")
        C = _positive_vector(self.C, "CauerLadder.C", "J/K")
        _check_pair(R, C, "CauerLadder", ("R", "C"))
        object.__setattr__(self, "R", R)
        object.__setattr__(self, "C", C)

    @property
    def stages(self) -> int:
        """Return the number of RC stages (nodes) of the ladder."""
        return int(self.R.size)


@dataclass(frozen=True, eq=False)
class FosterNetwork:
    """Foster network as datasheets print it: ``Zth(t) = sum_i R_i (1 - exp(-t / tau_i))``.

    Each stage is a resistance ``R_i`` in parallel with a capacity ``tau_i / R_i``; the stages are
    in series from junction to case. The internal nodes have no physical meaning, so the network
    is converted with :func:`foster_to_cauer` before it is coupled to the board. Equal time
    constants are allowed (they are merged during conversion). Arrays are validated and stored
    read-only; instances compare by identity.

    Attributes
    ----------
    R : (n,) float ndarray, K/W
        Stage resistances, ``1 <= n <= MAX_FOSTER_STAGES``.
    tau : (n,) float ndarray, s
        Stage time constants.

    Raises
    ------
    BoardFileError
        If the arrays are empty, of unequal length, longer than ``MAX_FOSTER_STAGES``, or hold
        a non-positive or non-finite value.
    """

    R: FloatArray
    tau: FloatArray

    def __post_init__(self) -> None:
        R = _positive_vector(self.R, "FosterNetwork.R", "K/W")
        tau = _positive_vector(self.tau, "FosterNetwork.tau", "s")
        _check_pair(R, tau, "FosterNetwork", ("R", "tau"), max_stages=MAX_FOSTER_STAGES)
        object.__setattr__(self, "R", R)
        object.__setattr__(self, "tau", tau)

    @property
    def stages(self) -> int:
        """Return the number of RC stages of the network."""
        return int(self.R.size)


def _step_times(t: npt.ArrayLike) -> FloatArray:
    """Return times as a float array with negative times clipped to 0 (the step starts at 0)."""
    times = np.asarray(t, dtype=np.float64)
    if np.isnan(times).any():
        raise ValueError("t: found NaN, expected times in seconds")
    return np.maximum(times, 0.0)


def foster_zth(foster: FosterNetwork, t: npt.ArrayLike) -> FloatArray:
    """Return the Foster step response ``Zth(t) = sum_i R_i (1 - exp(-t / tau_i))``.

    Parameters
    ----------
    foster : FosterNetwork
        The network.
    t : float ndarray of any shape, s
        Times after the power step; ``Zth`` is 0 for ``t <= 0`` and ``sum(R)`` at ``t = inf``.

    Returns
    -------
    float ndarray, shape of ``t``, K/W
        Junction temperature rise per watt of the power step.

    Raises
    ------
    ValueError
        If ``t`` holds NaN.

    Examples
    --------
    >>> net = FosterNetwork(R=np.array([1.0, 3.0]), tau=np.array([1e-3, 1.0]))
    >>> foster_zth(net, np.array([-1.0, 0.0, np.inf])).tolist()
    [0.0, 0.0, 4.0]
    """
    times = _step_times(t)
    # expm1 keeps full relative precision for t << tau, where 1 - exp(-t/tau) would cancel.
    return np.asarray(-np.expm1(-times[..., None] / foster.tau) @ foster.R, dtype=np.float64)


def ladder_matrices(ladder: CauerLadder) -> tuple[FloatArray, FloatArray, float]:
    """Return the capacity vector, conductance matrix and board conductance of a ladder.

    With node temperatures ``T`` (node 0 = junction), board temperature ``T_b`` and junction
    power ``P`` the ladder obeys ``diag(C) T' + G T = P e_0 + g_out T_b e_{n-1}``
    (Kirchhoff's current law at each node). ``G`` is symmetric positive definite and
    tridiagonal; every row sums to zero except the last, which sums to ``g_out``.

    Parameters
    ----------
    ladder : CauerLadder
        The ladder.

    Returns
    -------
    C : (n,) float ndarray, J/K
        Node capacities (a new, writable array).
    G : (n, n) float ndarray, W/K
        Conductance matrix among the ladder nodes, including ``g_out`` on the last diagonal entry.
    g_out : float, W/K
        Conductance ``1 / R[-1]`` from the last node to the board.

    Examples
    --------
    >>> C, G, g_out = ladder_matrices(CauerLadder(R=np.array([1.0, 2.0]), C=np.array([3.0, 4.0])))
    >>> G.tolist(), g_out
    ([[1.0, -1.0], [-1.0, 1.5]], 0.5)
    """
    g = 1.0 / ladder.R
    n = g.size
    nodes = np.arange(n)
    G = np.zeros((n, n), dtype=np.float64)
    G[nodes, nodes] = g  # each node's link toward the board
    G[nodes[1:], nodes[1:]] += g[:-1]  # and its link back toward the junction
    G[nodes[:-1], nodes[1:]] = -g[:-1]
    G[nodes[1:], nodes[:-1]] = -g[:-1]
    return ladder.C.copy(), G, float(g[-1])


def _ladder_modes(ladder: CauerLadder) -> tuple[FloatArray, FloatArray]:
    """Return decay rates (1/s) and weights (K/W) of the ladder's junction step response.

    Solving ``G phi = lambda diag(C) phi`` with ``phi^T diag(C) phi = 1`` diagonalises the
    ladder, so ``Zth(t) = sum_k phi_k[0]^2 / lambda_k (1 - exp(-lambda_k t))``: the equivalent
    Foster network has ``tau_k = 1/lambda_k`` and ``R_k = phi_k[0]^2 / lambda_k``.
    """
    C, G, _ = ladder_matrices(ladder)
    rates, modes = scipy.linalg.eigh(G, np.diag(C))
    weights = modes[0, :] ** 2 / rates
    return np.asarray(rates, dtype=np.float64), np.asarray(weights, dtype=np.float64)


def cauer_zth(ladder: CauerLadder, t: npt.ArrayLike) -> FloatArray:
    """Return the junction step response ``Zth(t)`` of a ladder whose far end is held fixed.

    A power step of 1 W enters node 0 at ``t = 0`` with all nodes at the board temperature,
    which stays fixed (ideal case or board). The response is evaluated from the generalized
    symmetric eigenproblem ``G phi = lambda diag(C) phi`` (``scipy.linalg.eigh``):
    ``Zth(t) = sum_k phi_k[0]^2 / lambda_k (1 - exp(-lambda_k t))`` with ``phi_k`` normalised
    to ``phi_k^T diag(C) phi_k = 1``.

    Parameters
    ----------
    ladder : CauerLadder
        The ladder.
    t : float ndarray of any shape, s
        Times after the power step; ``Zth`` is 0 for ``t <= 0`` and ``sum(R)`` at ``t = inf``.

    Returns
    -------
    float ndarray, shape of ``t``, K/W
        Junction temperature rise per watt of the power step.

    Raises
    ------
    ValueError
        If ``t`` holds NaN.

    Examples
    --------
    >>> ladder = CauerLadder(R=np.array([2.0]), C=np.array([0.25]))
    >>> np.round(cauer_zth(ladder, np.array([0.5, np.inf])), 12).tolist()
    [1.264241117657, 2.0]
    """
    times = _step_times(t)
    rates, weights = _ladder_modes(ladder)
    return np.asarray(-np.expm1(-times[..., None] * rates) @ weights, dtype=np.float64)


def _times_linear(poly: list[Fraction], tau: Fraction) -> list[Fraction]:
    """Multiply a polynomial (coefficients lowest power first) by ``1 + tau s``."""
    return [a + tau * b for a, b in zip([*poly, Fraction(0)], [Fraction(0), *poly], strict=True)]


def _to_float(value: Fraction, name: str) -> float:
    """Round an exact element value to float64, or raise if it leaves the float64 range."""
    try:
        number = float(value)
    except OverflowError:
        number = math.inf
    if not (math.isfinite(number) and number > 0.0):
        exponent = math.log10(value.numerator) - math.log10(value.denominator)
        raise BoardFileError(
            f"foster_to_cauer: found Cauer element {name} ~ 1e{exponent:.0f}, expected a value "
            "within the float64 range (the Foster values span too many decades)"
        )
    return number


def foster_to_cauer(foster: FosterNetwork) -> CauerLadder:
    """Convert a Foster network to the Cauer ladder with the same junction impedance.

    The Foster impedance ``Z(s) = sum_i R_i / (1 + s tau_i) = N(s) / D(s)`` is written as a ratio
    of polynomials, ``D(s) = prod_i (1 + s tau_i)`` (degree n) and
    ``N(s) = sum_i R_i prod_{j != i} (1 + s tau_j)`` (degree n - 1). The admittance
    ``Y = D / N`` is expanded by repeated polynomial long division from the highest power
    (Cauer's first form, Cauer 1926; Guillemin 1957, RC driving-point synthesis)::

        Y(s) = s C_1 + 1 / (R_1 + 1 / (s C_2 + 1 / (R_2 + ... + 1 / (s C_n + 1 / R_n))))

    Each division alternately removes a shunt capacity (quotient ``C_k s``) and a series
    resistance (constant quotient ``R_k``). Floating-point division loses all significant digits
    after four or five stages (Székely 1997), so the whole expansion runs in exact rational
    arithmetic (``fractions.Fraction``; every float converts exactly) and each element is
    rounded to float64 once, at the end. For distinct positive time constants all elements are
    positive (Guillemin 1957). Stages with exactly equal time constants are first merged into
    one stage with the summed resistance, which leaves ``Z(s)`` unchanged; the ladder then has
    one stage per distinct time constant.

    Parameters
    ----------
    foster : FosterNetwork
        The network (1 to ``MAX_FOSTER_STAGES`` stages).

    Returns
    -------
    CauerLadder
        Ladder with one stage per distinct time constant; ``sum(R)`` equals the Foster
        ``sum(R)`` and ``C[0] = 1 / sum(R_i / tau_i)``.

    Raises
    ------
    BoardFileError
        If a ladder element falls outside the float64 range (only for absurd inputs).

    Examples
    --------
    >>> ladder = foster_to_cauer(FosterNetwork(R=np.array([2.0]), tau=np.array([0.5])))
    >>> ladder.R.tolist(), ladder.C.tolist()
    ([2.0], [0.25])
    """
    merged: dict[float, Fraction] = {}
    for r, tau in zip(foster.R.tolist(), foster.tau.tolist(), strict=True):
        merged[tau] = merged.get(tau, Fraction(0)) + Fraction(r)
    taus = sorted(merged)  # the result does not depend on the order; sorting makes it canonical

    # Coefficient lists, lowest power first.
    D = [Fraction(1)]
    N = [Fraction(0)]
    for tau in taus:
        # Z + R / (1 + s tau) = (N (1 + s tau) + R D) / (D (1 + s tau))
        exact_tau, padded_D = Fraction(tau), [*D, Fraction(0)]
        N = [
            n + merged[tau] * d for n, d in zip(_times_linear(N, exact_tau), padded_D, strict=True)
        ]
        D = _times_linear(D, exact_tau)
    N = N[:-1]  # N has degree n - 1; its s^n coefficient is identically zero

    capacities: list[Fraction] = []
    resistances: list[Fraction] = []
    numerator, denominator = D, N  # the remaining admittance numerator / denominator
    while True:
        # Shunt capacity: deg(numerator) = deg(denominator) + 1.
        c = numerator[-1] / denominator[-1]
        shifted = [Fraction(0), *denominator]  # s * denominator
        rest = [a - c * b for a, b in zip(numerator, shifted, strict=True)][:-1]
        capacities.append(c)
        # Series resistance: the remaining impedance denominator / rest has equal degrees.
        r = denominator[-1] / rest[-1]
        after = [a - r * b for a, b in zip(denominator, rest, strict=True)][:-1]
        resistances.append(r)
        if not after:
            break
        # Cauer/Guillemin: for distinct positive time constants no leading term cancels early.
        assert after[-1] != 0, "Foster-to-Cauer expansion terminated early"
        numerator, denominator = rest, after

    R = [_to_float(value, f"R[{i}]") for i, value in enumerate(resistances)]
    C = [_to_float(value, f"C[{i}]") for i, value in enumerate(capacities)]
    return CauerLadder(R=np.array(R), C=np.array(C))


def parse_junction(
    spec: Mapping[str, Any] | None, where: str
) -> CauerLadder | FosterNetwork | None:
    """Validate a part's ``junction`` table from the parsed board file and build its network.

    Accepted forms (TOML)::

        junction = { cauer = { r_k_per_w = [...], c_j_per_k = [...] } }
        junction = { foster = { r_k_per_w = [...], tau_s = [...] } }

    Parameters
    ----------
    spec : mapping or None
        The parsed ``junction`` table; ``None`` when the part has none.
    where : str
        Location of the table, e.g. ``"board.toml: part[U3].junction"``; error messages append
        the field path below it (``.foster.tau_s[2]``).

    Returns
    -------
    CauerLadder, FosterNetwork or None
        The network as given (a Foster network is not converted here), or ``None`` for no table.

    Raises
    ------
    BoardFileError
        On an unknown or missing key, a value that is not a list of positive finite numbers,
        lists of unequal length, or more than ``MAX_FOSTER_STAGES`` Foster stages.

    Examples
    --------
    >>> spec = {"foster": {"r_k_per_w": [0.5, 1.5], "tau_s": [1e-3, 0.1]}}
    >>> parse_junction(spec, "b.toml: part[U3].junction").tau.tolist()
    [0.001, 0.1]
    >>> bad = {"foster": {"r_k_per_w": [0.5, -1.0], "tau_s": [1e-3, 0.1]}}
    >>> parse_junction(bad, "U3.junction")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    boardheat.errors.BoardFileError: U3.junction.foster.r_k_per_w[1]: found -1.0, expected a ...
    """
    if spec is None:
        return None
    choices = " or ".join(repr(kind) for kind in _JUNCTION_KEYS)
    if not isinstance(spec, Mapping):
        raise BoardFileError(f"{where}: found {_found(spec)}, expected a table with key {choices}")
    for key in spec:
        if key not in _JUNCTION_KEYS:
            raise BoardFileError(f"{where}: unknown key {key!r}, expected {choices}")
    if len(spec) != 1:
        found = ", ".join(repr(key) for key in spec) or "no keys"
        raise BoardFileError(f"{where}: found {found}, expected exactly one key, {choices}")
    kind, body = next(iter(spec.items()))
    path = f"{where}.{kind}"
    first_key, second_key, second_unit = _JUNCTION_KEYS[kind]
    expected = f"{first_key!r} and {second_key!r}"
    if not isinstance(body, Mapping):
        raise BoardFileError(f"{path}: found {_found(body)}, expected a table with keys {expected}")
    for key in body:
        if key not in (first_key, second_key):
            raise BoardFileError(f"{path}: unknown key {key!r}, expected {expected}")
    for key in (first_key, second_key):
        if key not in body:
            raise BoardFileError(f"{path}: missing key {key!r}, expected {expected}")
    first = _positive_vector(body[first_key], f"{path}.{first_key}", "K/W")
    second = _positive_vector(body[second_key], f"{path}.{second_key}", second_unit)
    if kind == "cauer":
        _check_pair(first, second, path, (first_key, second_key))
        return CauerLadder(R=first, C=second)
    _check_pair(first, second, path, (first_key, second_key), max_stages=MAX_FOSTER_STAGES)
    return FosterNetwork(R=first, tau=second)
