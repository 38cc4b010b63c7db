"""ITS-90 thermocouple reference functions (types E, J, K, N, T).

Coefficients are the NIST reference-function and inverse-polynomial coefficients of
NIST Monograph 175 (Burns et al. 1993), as published in NIST SRD 60. The reference
functions give emf with the reference junction at 0 °C; the inverse polynomials are
NIST's own fits, good to a few hundredths of a kelvin (the error band is in
``INVERSE_ERROR_C``). ``refine=True`` polishes the inverse with Newton steps on the
reference function, so a round trip is exact to 1 µK, which matters when we difference
two channels to get a temperature rise of a few kelvin.

The interface speaks µV (what a front end in raw mode sends); NIST's tables are in mV.
Functions take a float or a numpy array and return the same shape.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

ArrayLike = float | npt.NDArray[np.float64]


class Its90RangeError(ValueError):
    """A temperature or emf lies outside the range NIST defines for that thermocouple type."""


class Its90TypeError(ValueError):
    """An unknown thermocouple type letter."""


@dataclass(frozen=True)
class _Piece:
    lo: float
    hi: float
    coeffs: tuple[float, ...]  # ascending powers; mV per °C^i (reference) or °C per mV^i (inverse)


@dataclass(frozen=True)
class _TypeData:
    reference: tuple[_Piece, ...]  # t in °C -> E in mV
    inverse: tuple[_Piece, ...]  # E in mV -> t in °C
    exp_term: tuple[float, float, float] | None = None  # type K: a0·exp(a1·(t − a2)²) above 0 °C


_DATA: dict[str, _TypeData] = {
    "E": _TypeData(
        reference=(
            _Piece(-270.0, 0.0, (
                0.0, 0.586655087080e-01, 0.454109771240e-04, -0.779980486860e-06, -0.258001608430e-07,
                -0.594525830570e-09, -0.932140586670e-11, -0.102876055340e-12, -0.803701236210e-15,
                -0.439794973910e-17, -0.164147763550e-19, -0.396736195160e-22, -0.558273287210e-25,
                -0.346578420130e-28)),
            _Piece(0.0, 1000.0, (
                0.0, 0.586655087100e-01, 0.450322755820e-04, 0.289084072120e-07, -0.330568966520e-09,
                0.650244032700e-12, -0.191974955040e-15, -0.125366004970e-17, 0.214892175690e-20,
                -0.143880417820e-23, 0.359608994810e-27)),
        ),
        inverse=(
            _Piece(-8.825, 0.0, (
                0.0, 1.6977288e01, -4.3514970e-01, -1.5859697e-01, -9.2502871e-02, -2.6084314e-02,
                -4.1360199e-03, -3.4034030e-04, -1.1564890e-05)),
            _Piece(0.0, 76.373, (
                0.0, 1.7057035e01, -2.3301759e-01, 6.5435585e-03, -7.3562749e-05, -1.7896001e-06,
                8.4036165e-08, -1.3735879e-09, 1.0629823e-11, -3.2447087e-14)),
        ),
    ),
    "J": _TypeData(
        reference=(
            _Piece(-210.0, 760.0, (
                0.0, 0.503811878150e-01, 0.304758369300e-04, -0.856810657200e-07, 0.132281952950e-09,
                -0.170529583370e-12, 0.209480906970e-15, -0.125383953360e-18, 0.156317256970e-22)),
            _Piece(760.0, 1200.0, (
                0.296456256810e03, -0.149761277860e01, 0.317871039240e-02, -0.318476867010e-05,
                0.157208190040e-08, -0.306913690560e-12)),
        ),
        inverse=(
            _Piece(-8.095, 0.0, (
                0.0, 1.9528268e01, -1.2286185e00, -1.0752178e00, -5.9086933e-01, -1.7256713e-01,
                -2.8131513e-02, -2.3963370e-03, -8.3823321e-05)),
            _Piece(0.0, 42.919, (
                0.0, 1.978425e01, -2.001204e-01, 1.036969e-02, -2.549687e-04, 3.585153e-06,
                -5.344285e-08, 5.099890e-10)),
            _Piece(42.919, 69.553, (
                -3.11358187e03, 3.00543684e02, -9.94773230e00, 1.70276630e-01, -1.43033468e-03,
                4.73886084e-06)),
        ),
    ),
    "K": _TypeData(
        reference=(
            _Piece(-270.0, 0.0, (
                0.0, 0.394501280250e-01, 0.236223735980e-04, -0.328589067840e-06, -0.499048287770e-08,
                -0.675090591730e-10, -0.574103274280e-12, -0.310888728940e-14, -0.104516093650e-16,
                -0.198892668780e-19, -0.163226974860e-22)),
            _Piece(0.0, 1372.0, (
                -0.176004136860e-01, 0.389212049750e-01, 0.185587700320e-04, -0.994575928740e-07,
                0.318409457190e-09, -0.560728448890e-12, 0.560750590590e-15, -0.320207200030e-18,
                0.971511471520e-22, -0.121047212750e-25)),
        ),
        inverse=(
            _Piece(-5.891, 0.0, (
                0.0, 2.5173462e01, -1.1662878e00, -1.0833638e00, -8.9773540e-01, -3.7342377e-01,
                -8.6632643e-02, -1.0450598e-02, -5.1920577e-04)),
            _Piece(0.0, 20.644, (
                0.0, 2.508355e01, 7.860106e-02, -2.503131e-01, 8.315270e-02, -1.228034e-02,
                9.804036e-04, -4.413030e-05, 1.057734e-06, -1.052755e-08)),
            _Piece(20.644, 54.886, (
                -1.318058e02, 4.830222e01, -1.646031e00, 5.464731e-02, -9.650715e-04, 8.802193e-06,
                -3.110810e-08)),
        ),
        exp_term=(0.118597600000e00, -0.118343200000e-03, 0.126968600000e03),
    ),
    "N": _TypeData(
        reference=(
            _Piece(-270.0, 0.0, (
                0.0, 0.261591059620e-01, 0.109574842280e-04, -0.938411115540e-07, -0.464120397590e-10,
                -0.263033577160e-11, -0.226534380030e-13, -0.760893007910e-16, -0.934196678350e-19)),
            _Piece(0.0, 1300.0, (
                0.0, 0.259293946010e-01, 0.157101418800e-04, 0.438256272370e-07, -0.252611697940e-09,
                0.643118193390e-12, -0.100634715190e-14, 0.997453389920e-18, -0.608632456070e-21,
                0.208492293390e-24, -0.306821961510e-28)),
        ),
        inverse=(
            _Piece(-3.990, 0.0, (
                0.0, 3.8436847e01, 1.1010485e00, 5.2229312e00, 7.2060525e00, 5.8488586e00,
                2.7754916e00, 7.7075166e-01, 1.1582665e-01, 7.3138868e-03)),
            _Piece(0.0, 20.613, (
                0.0, 3.86896e01, -1.08267e00, 4.70205e-02, -2.12169e-06, -1.17272e-04, 5.39280e-06,
                -7.98156e-08)),
            _Piece(20.613, 47.513, (
                1.972485e01, 3.300943e01, -3.915159e-01, 9.855391e-03, -1.274371e-04, 7.767022e-07)),
        ),
    ),
    "T": _TypeData(
        reference=(
            _Piece(-270.0, 0.0, (
                0.0, 0.387481063640e-01, 0.441944343470e-04, 0.118443231050e-06, 0.200329735540e-07,
                0.901380195590e-09, 0.226511565930e-10, 0.360711542050e-12, 0.384939398830e-14,
                0.282135219250e-16, 0.142515947790e-18, 0.487686622860e-21, 0.107955392700e-23,
                0.139450270620e-26, 0.797951539270e-30)),
            _Piece(0.0, 400.0, (
                0.0, 0.387481063640e-01, 0.332922278800e-04, 0.206182434040e-06, -0.218822568460e-08,
                0.109968809280e-10, -0.308157587720e-13, 0.454791352900e-16, -0.275129016730e-19)),
        ),
        inverse=(
            _Piece(-5.603, 0.0, (
                0.0, 2.5949192e01, -2.1316967e-01, 7.9018692e-01, 4.2527777e-01, 1.3304473e-01,
                2.0241446e-02, 1.2668171e-03)),
            _Piece(0.0, 20.872, (
                0.0, 2.592800e01, -7.602961e-01, 4.637791e-02, -2.165394e-03, 6.048144e-05,
                -7.293422e-07)),
        ),
    ),
}

TYPES: tuple[str, ...] = tuple(sorted(_DATA))

# NIST's stated error of each inverse polynomial against the reference function, °C (lo, hi) per piece.
INVERSE_ERROR_C: dict[str, tuple[tuple[float, float], ...]] = {
    "E": ((-0.01, 0.03), (-0.02, 0.02)),
    "J": ((-0.05, 0.03), (-0.04, 0.04), (-0.04, 0.03)),
    "K": ((-0.02, 0.04), (-0.05, 0.04), (-0.05, 0.06)),
    "N": ((-0.02, 0.03), (-0.02, 0.03), (-0.04, 0.02)),
    "T": ((-0.02, 0.04), (-0.03, 0.03)),
}


def _data(tc_type: str) -> _TypeData:
    try:
        return _DATA[tc_type.upper()]
    except (KeyError, AttributeError):
        raise Its90TypeError(
            f"thermocouple type {tc_type!r} is not supported; use one of {', '.join(TYPES)}"
        ) from None


def reference_range_C(tc_type: str) -> tuple[float, float]:
    """Temperature span of the reference function."""
    ref = _data(tc_type).reference
    return ref[0].lo, ref[-1].hi


def inverse_range_uV(tc_type: str) -> tuple[float, float]:
    """Emf span (reference junction at 0 °C) that the inverse polynomials cover."""
    inv = _data(tc_type).inverse
    return inv[0].lo * 1000.0, inv[-1].hi * 1000.0


def _as_array(x: ArrayLike) -> npt.NDArray[np.float64]:
    return np.asarray(x, dtype=np.float64)


def _out(a: npt.NDArray[np.float64], like: ArrayLike) -> ArrayLike:
    return float(a) if np.ndim(like) == 0 else a


def _piecewise(x: npt.NDArray[np.float64], pieces: tuple[_Piece, ...]) -> npt.NDArray[np.float64]:
    y = np.empty_like(x)
    for i, p in enumerate(pieces):
        mask = x < p.hi if i < len(pieces) - 1 else np.ones_like(x, dtype=bool)
        if i:
            mask &= x >= p.lo
        y[mask] = np.polynomial.polynomial.polyval(x[mask], p.coeffs)
    return y


def _reference_mV(t: npt.NDArray[np.float64], d: _TypeData) -> npt.NDArray[np.float64]:
    e = _piecewise(t, d.reference)
    if d.exp_term is not None:
        a0, a1, a2 = d.exp_term
        pos = t >= 0.0
        e[pos] += a0 * np.exp(a1 * (t[pos] - a2) ** 2)
    return e


def _reference_slope(t: npt.NDArray[np.float64], d: _TypeData) -> npt.NDArray[np.float64]:
    """dE/dt in mV/K."""
    pieces = tuple(_Piece(p.lo, p.hi, tuple(np.polynomial.polynomial.polyder(p.coeffs))) for p in d.reference)
    s = _piecewise(t, pieces)
    if d.exp_term is not None:
        a0, a1, a2 = d.exp_term
        pos = t >= 0.0
        s[pos] += a0 * np.exp(a1 * (t[pos] - a2) ** 2) * 2.0 * a1 * (t[pos] - a2)
    return s


def _check_range(
    x: npt.NDArray[np.float64], lo: float, hi: float, what: str, unit: str, tc_type: str
) -> None:
    if x.size and (not np.all(np.isfinite(x)) or x.min() < lo or x.max() > hi):
        bad = x[~np.isfinite(x) | (x < lo) | (x > hi)].flat[0]
        raise Its90RangeError(
            f"type {tc_type.upper()} {what} {bad:.3f} {unit} is outside the ITS-90 range "
            f"{lo:g}..{hi:g} {unit}; check the thermocouple type, the wiring and the channel mode"
        )


def emf_uV(t_C: ArrayLike, tc_type: str) -> ArrayLike:
    """Reference emf (junction at t, reference junction at 0 °C), µV."""
    d = _data(tc_type)
    t = _as_array(t_C)
    _check_range(t, d.reference[0].lo, d.reference[-1].hi, "temperature", "°C", tc_type)
    return _out(_reference_mV(t, d) * 1000.0, t_C)


def seebeck_uV_per_K(t_C: ArrayLike, tc_type: str) -> ArrayLike:
    """Slope of the reference function, µV/K: turns an emf noise into a temperature noise."""
    d = _data(tc_type)
    t = _as_array(t_C)
    _check_range(t, d.reference[0].lo, d.reference[-1].hi, "temperature", "°C", tc_type)
    return _out(_reference_slope(t, d) * 1000.0, t_C)


def temperature_C(emf_uV_: ArrayLike, tc_type: str, *, refine: bool = False) -> ArrayLike:
    """Temperature for an emf referred to 0 °C, by NIST's inverse polynomials.

    With ``refine`` the result is polished by Newton steps on the reference function.
    """
    d = _data(tc_type)
    e_uV = _as_array(emf_uV_)
    lo, hi = inverse_range_uV(tc_type)
    _check_range(e_uV, lo, hi, "emf", "µV", tc_type)
    e_mV = e_uV / 1000.0
    t = _piecewise(e_mV, d.inverse)
    if refine:
        ref_lo, ref_hi = d.reference[0].lo, d.reference[-1].hi
        for _ in range(4):
            t = np.clip(t, ref_lo, ref_hi)
            t = t - (_reference_mV(t, d) - e_mV) / _reference_slope(t, d)
    return _out(t, emf_uV_)


def temperature_from_emf(
    emf_uV_: ArrayLike, cj_C: ArrayLike, tc_type: str, *, refine: bool = False
) -> ArrayLike:
    """Hot-junction temperature from a measured emf and the cold-junction temperature.

    The emf of the cold junction's own temperature (referred to 0 °C) is added before inverting:
    t = E⁻¹(E_meas + E(t_cj)). Adding temperatures instead would be wrong because E is not linear.
    """
    total = _as_array(emf_uV_) + _as_array(emf_uV(cj_C, tc_type))
    t = temperature_C(total, tc_type, refine=refine)
    return t if np.ndim(emf_uV_) or np.ndim(cj_C) else float(t)


def emf_for_temperature(t_C: ArrayLike, cj_C: ArrayLike, tc_type: str) -> ArrayLike:
    """Emf a thermocouple shows with its hot junction at t and its cold junction at cj (simulators use it)."""
    out = _as_array(emf_uV(t_C, tc_type)) - _as_array(emf_uV(cj_C, tc_type))
    return out if np.ndim(t_C) or np.ndim(cj_C) else float(out)


__all__ = [
    "INVERSE_ERROR_C",
    "TYPES",
    "Its90RangeError",
    "Its90TypeError",
    "emf_for_temperature",
    "emf_uV",
    "inverse_range_uV",
    "reference_range_C",
    "seebeck_uV_per_K",
    "temperature_C",
    "temperature_from_emf",
]
