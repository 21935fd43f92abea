"""A block's transfer function: a rational part (gain, zeros, poles) times exp(-T s).

Roots are kept in factored form through products and powers, so a block built
from factors of order up to 20 keeps its roots exactly; only sums expand into
polynomials (over a common denominator made from the poles, which stay
factored). Evaluation on arrays of complex s pairs each zero with a pole, which
keeps intermediate values near 1 and avoids overflow at high order. Delays are
exact: ``exp(-T s)``, never a Padé approximation.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

__all__ = ["Transfer", "TransferError", "AXIS_TOL"]

#: a root whose real part is below this fraction of its size lies on the imaginary axis
AXIS_TOL = 1e-11
_MATCH_TOL = 1e-9


class TransferError(ValueError):
    """An operation that has no rational-times-delay result (the caller adds the location)."""


def _clean_roots(roots) -> np.ndarray:
    """Tidy roots of a real polynomial: exact conjugate pairs, exact axis and real roots."""
    r = np.asarray(roots, dtype=complex).ravel()
    if r.size == 0:
        return r
    scale = np.maximum(np.abs(r), 1e-300)
    re = np.where(np.abs(r.real) <= AXIS_TOL * scale, 0.0, r.real)
    im = np.where(np.abs(r.imag) <= AXIS_TOL * scale, 0.0, r.imag)
    r = re + 1j * im
    # pair up conjugates so that the polynomial stays real
    real = r[r.imag == 0]
    upper = r[r.imag > 0]
    lower = r[r.imag < 0]
    if upper.size == lower.size:
        upper = np.sort_complex(upper)
        lower_sorted = np.sort_complex(np.conj(lower))
        avg = 0.5 * (upper + lower_sorted)
        pairs = np.concatenate([avg, np.conj(avg)])
    else:  # not a real polynomial's roots (should not happen): keep as they are
        pairs = np.concatenate([upper, lower])
    return np.concatenate([np.sort(real.real).astype(complex), pairs])


def _roots(coeffs: np.ndarray) -> np.ndarray:
    """Roots of a polynomial (descending coefficients); TransferError when its coefficients
    span more than double precision can hold (the companion matrix overflows)."""
    coeffs = np.asarray(coeffs)
    with np.errstate(all="ignore"):
        coeffs = coeffs / np.max(np.abs(coeffs))
        try:
            roots = np.roots(coeffs)
        except np.linalg.LinAlgError:
            roots = np.array([np.nan])
    if not np.all(np.isfinite(roots)):
        raise TransferError("the coefficients span more than double precision can hold; rescale the "
                            "transfer (e.g. time in ms)")
    return roots


def _poly(roots: np.ndarray) -> np.ndarray:
    """Monic polynomial (descending powers) with these roots, real when possible."""
    p = np.poly(roots) if roots.size else np.array([1.0])
    p = np.atleast_1d(p)
    if np.iscomplexobj(p) and np.allclose(p.imag, 0.0, atol=1e-12 * max(1.0, np.abs(p).max())):
        p = p.real
    return p


def _remove_matches(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Split multisets: (a minus common, b minus common, common)."""
    a = list(a)
    rest_b = []
    common = []
    for x in b:
        best = None
        for i, y in enumerate(a):
            if abs(x - y) <= _MATCH_TOL * max(abs(x), abs(y)):  # relative: tiny roots are roots too
                best = i
                break
        if best is None:
            rest_b.append(x)
        else:
            common.append(a.pop(best))
    return np.array(a, dtype=complex), np.array(rest_b, dtype=complex), np.array(common, dtype=complex)


def _no_roots() -> np.ndarray:
    return np.zeros(0, complex)


@dataclass(frozen=True, eq=False)
class Transfer:
    """gain * prod(s - zeros) / prod(s - poles) * exp(-delay * s).

    `cancelled` holds the poles that `minimal()` removed together with a zero at the
    same place: modes of the block as written that no input excites and no output
    shows. An unstable one is still a mode of the system (docs/method.md, hidden modes).
    """

    gain: float
    zeros: np.ndarray
    poles: np.ndarray
    delay: float = 0.0
    cancelled: np.ndarray = field(default_factory=_no_roots)

    # --- construction ---------------------------------------------------------
    @staticmethod
    def constant(value: float) -> "Transfer":
        """A static gain `value`: no zeros, no poles, no delay."""
        return Transfer(float(value), np.zeros(0, complex), np.zeros(0, complex), 0.0)

    @staticmethod
    def laplace() -> "Transfer":
        """The Laplace variable s itself: gain 1 and one zero at the origin."""
        return Transfer(1.0, np.zeros(1, complex), np.zeros(0, complex), 0.0)

    @staticmethod
    def pure_delay(T: float) -> "Transfer":
        """exp(-T s): a dead time of T seconds with unit gain."""
        return Transfer(1.0, np.zeros(0, complex), np.zeros(0, complex), float(T))

    @staticmethod
    def from_zpk(zeros, poles, gain, delay: float = 0.0) -> "Transfer":
        """gain * prod(s - zeros) / prod(s - poles) * exp(-delay s), from its roots (complex,
        rad/s) and its delay in seconds. A real or imaginary part below AXIS_TOL times the
        root's size is set to zero, and conjugate pairs are made exact."""
        return Transfer(float(gain), _clean_roots(zeros), _clean_roots(poles), float(delay))

    @staticmethod
    def from_coeffs(num, den, delay: float = 0.0) -> "Transfer":
        """num(s) / den(s) * exp(-delay s) from polynomial coefficients in descending powers of s
        (leading zeros dropped), factored into gain, zeros and poles. TransferError when the
        denominator is zero or the coefficients span more than double precision holds."""
        num = np.trim_zeros(np.atleast_1d(np.asarray(num, dtype=float)), "f")
        den = np.trim_zeros(np.atleast_1d(np.asarray(den, dtype=float)), "f")
        if den.size == 0:
            raise TransferError("the denominator is zero")
        if num.size == 0:
            return Transfer.constant(0.0)
        return Transfer(num[0] / den[0], _clean_roots(_roots(num)), _clean_roots(_roots(den)), float(delay))

    # --- properties -----------------------------------------------------------
    @property
    def is_zero(self) -> bool:
        """The zero transfer (a gain that underflowed to 0 keeps its roots and is not zero:
        the resolver refuses it as beyond double precision)."""
        return self.gain == 0.0 and self.zeros.size == 0 and self.poles.size == 0

    @property
    def relative_degree(self) -> int:
        """Poles minus zeros: >= 0 proper, >= 1 strictly proper."""
        return int(self.poles.size - self.zeros.size)

    @property
    def is_proper(self) -> bool:
        """Whether |G(s)| stays bounded as |s| -> inf: no more zeros than poles (the zero transfer
        is proper)."""
        return self.is_zero or self.relative_degree >= 0

    @property
    def feedthrough(self) -> float:
        """The limit of G(s) exp(T s) as |s| -> inf: signed (the gain of a biproper block),
        0.0 if strictly proper, inf if improper."""
        if self.is_zero or self.relative_degree > 0:
            return 0.0
        if self.relative_degree < 0:
            return float("inf")
        return self.gain

    @property
    def rhp_poles(self) -> int:
        """How many poles lie strictly in the right half plane (Re p > 0), with multiplicity;
        poles on the imaginary axis are not counted."""
        return int(np.sum(self.poles.real > 0))

    @property
    def axis_poles(self) -> np.ndarray:
        """The poles on the imaginary axis (Re p = 0 exactly, as construction tidies them), as
        complex numbers with multiplicity."""
        return self.poles[self.poles.real == 0]

    def num_den(self) -> tuple[np.ndarray, np.ndarray]:
        """Coefficient form (descending powers); for display and reference tests only."""
        return self.gain * _poly(self.zeros), _poly(self.poles)

    # --- evaluation -----------------------------------------------------------
    def evaluate(self, s) -> np.ndarray:
        """G(s) at the complex points `s` (rad/s, any shape; s = j w on the frequency axis), as a
        complex array of the same shape. Exact: the delay is exp(-T s), and each zero is paired
        with a pole so that high orders neither overflow nor lose digits. On a pole: inf or nan."""
        s = np.asarray(s, dtype=complex)
        out = np.full(s.shape, self.gain, dtype=complex)
        if self.is_zero:
            return out
        nz, npl = self.zeros.size, self.poles.size
        common = min(nz, npl)
        with np.errstate(divide="ignore", invalid="ignore"):
            for z, p in zip(self.zeros[:common], self.poles[:common]):
                out *= (s - z) / (s - p)
            for z in self.zeros[common:]:
                out *= s - z
            for p in self.poles[common:]:
                out /= s - p
        if self.delay:
            out *= np.exp(-self.delay * s)
        return out

    __call__ = evaluate

    # --- arithmetic -----------------------------------------------------------
    def __mul__(self, other: "Transfer | float") -> "Transfer":
        other = _as_transfer(other)
        if self.is_zero or other.is_zero:
            return Transfer.constant(0.0)
        return Transfer(self.gain * other.gain, np.concatenate([self.zeros, other.zeros]),
                        np.concatenate([self.poles, other.poles]), self.delay + other.delay)

    __rmul__ = __mul__

    def reciprocal(self) -> "Transfer":
        """1/G: zeros and poles swapped, the gain inverted and the delay negated. TransferError
        for the zero transfer."""
        if self.is_zero:
            raise TransferError("division by zero")
        gain = 1.0 / self.gain if self.gain != 0.0 else math.inf  # an underflowed gain: refused later
        return Transfer(gain, self.poles, self.zeros, -self.delay)

    def __truediv__(self, other: "Transfer | float") -> "Transfer":
        return self * _as_transfer(other).reciprocal()

    def __rtruediv__(self, other: float) -> "Transfer":
        return _as_transfer(other) * self.reciprocal()

    def __neg__(self) -> "Transfer":
        return Transfer(-self.gain, self.zeros, self.poles, self.delay)

    def __pow__(self, n: int) -> "Transfer":
        if n < 0:
            return self.reciprocal() ** (-n)
        if n == 0:
            return Transfer.constant(1.0)
        if self.is_zero:
            return Transfer.constant(0.0)
        try:
            gain = self.gain ** n
        except OverflowError:  # beyond double precision: the caller refuses it as not finite
            gain = math.copysign(math.inf, self.gain) if n % 2 else math.inf
        return Transfer(gain, np.tile(self.zeros, n), np.tile(self.poles, n), self.delay * n)

    def __add__(self, other: "Transfer | float") -> "Transfer":
        other = _as_transfer(other)
        if other.is_zero:
            return self
        if self.is_zero:
            return other
        if abs(self.delay - other.delay) > 1e-15 * max(self.delay, other.delay, 1.0):
            raise TransferError("a sum of terms with different delays is not a rational "
                                "transfer function times one delay")
        # common denominator: keep shared poles once (they stay factored)
        only_a, only_b, shared = _remove_matches(self.poles, other.poles)
        den = np.concatenate([shared, only_a, only_b])
        num_a = self.gain * np.polymul(_poly(self.zeros), _poly(only_b))
        num_b = other.gain * np.polymul(_poly(other.zeros), _poly(only_a))
        num = np.polyadd(num_a, num_b)
        if not (np.all(np.isfinite(num_a)) and np.all(np.isfinite(num_b)) and np.all(np.isfinite(num))):
            # e.g. 1/(s + 1e20)^16 + 1/(s + 1): the common numerator's coefficients pass 1e308
            raise OverflowError("the sum's coefficients are beyond double precision")
        num = np.real_if_close(num, tol=1e6)
        # the size of what each coefficient was summed from: a cancellation leaves rounding
        # noise of about eps times that, while a small coefficient written as such is kept
        gross = np.polyadd(np.abs(num_a), np.abs(num_b))
        if not np.any(np.abs(num) > 1e-13 * gross):
            return Transfer.constant(0.0)
        lead = 0
        while lead < num.size - 1 and abs(num[lead]) <= 1e-13 * gross[lead]:
            lead += 1
        num = num[lead:]
        zeros = _clean_roots(_roots(num)) if num.size > 1 else np.zeros(0, complex)
        return Transfer(float(np.real(num[0])), zeros, _clean_roots(den), self.delay)

    __radd__ = __add__

    def __sub__(self, other: "Transfer | float") -> "Transfer":
        return self + (-_as_transfer(other))

    def __rsub__(self, other: float) -> "Transfer":
        return _as_transfer(other) + (-self)

    # --- simplification -------------------------------------------------------
    def minimal(self) -> tuple["Transfer", np.ndarray]:
        """Cancel coinciding zero/pole pairs; returns the result (which keeps the cancelled
        poles in `cancelled`) and the poles cancelled here."""
        zeros, poles, common = _remove_matches(self.zeros, self.poles)
        if common.size == 0:
            return self, common
        common = _clean_roots(common)
        return Transfer(self.gain, _clean_roots(zeros), _clean_roots(poles), self.delay,
                        np.concatenate([self.cancelled, common])), common

    def __repr__(self) -> str:
        return (f"Transfer(gain={self.gain:.6g}, zeros={np.round(self.zeros, 6).tolist()}, "
                f"poles={np.round(self.poles, 6).tolist()}, delay={self.delay:.6g})")


def _as_transfer(x) -> Transfer:
    if isinstance(x, Transfer):
        return x
    return Transfer.constant(float(x))
