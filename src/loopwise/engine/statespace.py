"""Rational state-space forms of delay-free models (part of the reduce stage).

Each block application is realised on its own (a cascade of first- and
second-order sections, which keeps high-order blocks well conditioned), and
the wiring closes them up; an improper block (an ideal derivative) is realised
together with the block it feeds. Used by the reference tests and tools through
`loopwise.testing` (the check itself needs no state-space form).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .reduce import Reduction

__all__ = ["StateSpace", "loop_state_space", "closed_loop_poles"]


@dataclass(frozen=True, eq=False)
class StateSpace:
    """A real state-space form (A, B, C, D) of the loop transfer L = -y/v at a break (from
    the injected v to -y), or of the whole closed loop (then B, C and D are empty); the
    states are the block applications' own, `owners` naming the application of each state."""

    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    owners: tuple[str, ...]  # the application label each state belongs to


def _sections(zeros: np.ndarray, poles: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
    """Split into proper first- and second-order sections (real coefficients).

    Conjugate pole pairs give quadratic denominators, real poles linear ones
    (merged pairwise when a complex zero pair needs a quadratic home); zeros are
    placed so that no section has more zeros than poles.
    """
    pairs = [p for p in poles if p.imag > 0]
    reals = sorted((p.real for p in poles if p.imag == 0), key=abs)
    zpairs = [z for z in zeros if z.imag > 0]
    zreals = [z.real for z in zeros if z.imag == 0]
    dens: list[list[complex]] = [[p, np.conj(p)] for p in pairs]
    while len(zpairs) > len(dens) and len(reals) >= 2:
        dens.append([reals.pop(), reals.pop()])
    dens += [[r] for r in reals]
    nums: list[list[complex]] = [[] for _ in dens]
    quad = [i for i, d in enumerate(dens) if len(d) == 2]
    for i, z in zip(quad, zpairs):
        nums[i] = [z, np.conj(z)]
    for z in zreals:
        i = next(i for i, d in enumerate(dens) if len(nums[i]) < len(d))
        nums[i].append(z)
    return [(np.real(np.poly(n)) if n else np.array([1.0]), np.real(np.poly(d))) for n, d in zip(nums, dens)]


def _section_ss(num: np.ndarray, den: np.ndarray):
    """Controllable canonical form of a proper section of order 1 or 2."""
    den = np.asarray(den, float)
    num = np.concatenate([np.zeros(den.size - np.size(num)), np.asarray(num, float)]) / den[0]
    den = den / den[0]
    n = den.size - 1
    D = num[0]
    c = num[1:] - D * den[1:]  # strictly proper remainder's numerator
    A = np.zeros((n, n))
    A[0, :] = -den[1:]
    if n > 1:
        A[1:, :-1] = np.eye(n - 1)
    B = np.zeros((n, 1))
    B[0, 0] = 1.0
    return A, B, c.reshape(1, n), D


def _realise(tf) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """A minimal SISO realisation of gain * prod(s - z) / prod(s - p), section by section."""
    A = np.zeros((0, 0))
    B = np.zeros((0, 1))
    C = np.zeros((1, 0))
    D = float(tf.gain)
    for num, den in _sections(tf.zeros, tf.poles):
        Ai, Bi, Ci, Di = _section_ss(num, den)
        # series: the previous sections' output drives this one
        A = np.block([[A, np.zeros((A.shape[0], Ai.shape[0]))], [Bi @ C, Ai]])
        B = np.vstack([B, Bi * D])
        C = np.hstack([Di * C, Ci])
        D = Di * D
    return A, B, C, D


@dataclass(frozen=True)
class _Item:
    """One wiring term to realise: gain * transfer (None: a plain gain) from col into row."""

    row: int
    col: int
    gain: float
    transfer: object
    cut: bool
    label: str


def _items(red: Reduction, cut: frozenset[int], measured: int | None) -> list[_Item]:
    """The wiring terms, with every improper block merged into the one block its output
    feeds (a series chain: `G(C(e))` with an ideal derivative C realises as G*C).

    A chain can be merged when the improper block's output signal has no other term,
    feeds exactly one block application (not a cut wire) and nothing else, and is not
    the signal a break measures. Otherwise there is no state-space form (ValueError).
    """
    items = [_Item(i.row, i.col, i.term.gain, i.transfer, k in cut,
                   i.term.app.label if i.term.app is not None else "")
             for k, i in enumerate(red.instances)]
    while True:
        improper = next((x for x in items if x.transfer is not None and not x.transfer.is_proper), None)
        if improper is None:
            return items
        out = improper.row
        producers = [x for x in items if x.row == out]
        users = [x for x in items if x.col == out]
        if not (len(producers) == 1 and len(users) == 1 and users[0].transfer is not None
                and not users[0].cut and out != measured):
            raise ValueError(f"no state-space form: the improper block `{improper.label}` does not feed "
                             "exactly one block in a series chain")
        (user,) = users
        merged = _Item(user.row, improper.col, improper.gain * user.gain, user.transfer * improper.transfer,
                       improper.cut, f"{improper.label}*{user.label}")
        items = [x for x in items if x is not improper and x is not user] + [merged]


def loop_state_space(red: Reduction, name: str | None = None) -> StateSpace:
    """(A, B, C, D) of L_k = -y/v at break `name`; with name None, the whole closed loop (B, C empty)."""
    if red.has_delay:
        raise ValueError("a state-space form exists only for delay-free models")
    n = red.n
    cut = red.cut_sets[name] if name is not None else frozenset()
    sig = red.signals.index(red.cut_signal(name)) if name is not None else None
    items = _items(red, cut, sig)
    blocks = [(x, *_realise(x.transfer)) for x in items if x.transfer is not None]
    ns = sum(b[1].shape[0] for b in blocks)
    Ablk = np.zeros((ns, ns))
    Bx = np.zeros((ns, n))  # state input from signals
    Bv = np.zeros((ns, 1))  # state input from the injected test signal
    Cx = np.zeros((n, ns))
    M = np.eye(n)
    bv = np.zeros((n, 1))
    owners: list[str] = []
    off = 0
    for x, A, B, C, D in blocks:
        m = A.shape[0]
        Ablk[off:off + m, off:off + m] = A
        Cx[x.row, off:off + m] += x.gain * C[0]
        if x.cut:
            Bv[off:off + m, 0] += B[:, 0]
            bv[x.row, 0] += x.gain * D
        else:
            Bx[off:off + m, x.col] += B[:, 0]
            M[x.row, x.col] -= x.gain * D
        owners.extend([x.label] * m)
        off += m
    for x in items:
        if x.transfer is None:
            if x.cut:
                bv[x.row, 0] += x.gain
            else:
                M[x.row, x.col] -= x.gain
    Minv = np.linalg.inv(M)
    Acl = Ablk + Bx @ Minv @ Cx
    if name is None:
        return StateSpace(Acl, np.zeros((ns, 0)), np.zeros((0, ns)), np.zeros((0, 0)), tuple(owners))
    Bcl = Bx @ Minv @ bv + Bv
    Ccl = -(Minv @ Cx)[sig:sig + 1, :]
    Dcl = -(Minv @ bv)[sig:sig + 1, :]
    return StateSpace(Acl, Bcl, Ccl, Dcl, tuple(owners))


def closed_loop_poles(red: Reduction) -> np.ndarray:
    """The closed loop's poles (complex, rad/s, unordered): the eigenvalues of the whole state
    matrix, including poles that an exact cancellation hides from every loop transfer.
    Blocks on input paths are left out. ValueError for a model with a delay."""
    return np.linalg.eigvals(loop_state_space(red, None).A)
