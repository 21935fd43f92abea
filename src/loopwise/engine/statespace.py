"""Rational state-space forms of delay-free models (part of the reduce stage).

Each block application is realised on its own (a cascade of first- and
second-order sections, which keeps high-order blocks well conditioned), and
the wiring closes them up. Used to find unstable modes that a cancellation
hides inside a loop, and by the reference tests.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .reduce import Reduction

__all__ = ["StateSpace", "loop_state_space", "closed_loop_poles", "hidden_modes"]


@dataclass(frozen=True, eq=False)
class StateSpace:
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


def loop_state_space(red: Reduction, name: str | None = None) -> StateSpace:
    """(A, B, C, D) of L_k = -y/v at break `name`; with name None, the whole closed loop (B, C empty)."""
    if red.has_delay:
        raise ValueError("a state-space form exists only for delay-free models")
    n = red.n
    cut = red.cut_sets[name] if name is not None else frozenset()
    blocks = []
    for k, inst in enumerate(red.instances):
        if inst.transfer is not None:
            blocks.append((k, inst, *_realise(inst.transfer)))
    ns = sum(b[2].shape[0] for b in blocks)
    Ablk = np.zeros((ns, ns))
    Bx = np.zeros((ns, n))  # state input from signals
    Bv = np.zeros((ns, 1))  # state input from the injected test signal
    Cx = np.zeros((n, ns))
    M = np.eye(n)
    bv = np.zeros((n, 1))
    owners: list[str] = []
    off = 0
    for k, inst, A, B, C, D in blocks:
        m = A.shape[0]
        g = inst.term.gain
        Ablk[off:off + m, off:off + m] = A
        Cx[inst.row, off:off + m] += g * C[0]
        if k in cut:
            Bv[off:off + m, 0] += B[:, 0]
            bv[inst.row, 0] += g * D
        else:
            Bx[off:off + m, inst.col] += B[:, 0]
            M[inst.row, inst.col] -= g * D
        owners.extend([inst.term.app.label] * m)
        off += m
    for k, inst in enumerate(red.instances):
        if inst.transfer is None:
            if k in cut:
                bv[inst.row, 0] += inst.term.gain
            else:
                M[inst.row, inst.col] -= inst.term.gain
    Minv = np.linalg.inv(M)
    Acl = Ablk + Bx @ Minv @ Cx
    if name is None:
        return StateSpace(Acl, np.zeros((ns, 0)), np.zeros((0, ns)), np.zeros((0, 0)), tuple(owners))
    sig = red.signals.index(red._cut_signal(name))
    Bcl = Bx @ Minv @ bv + Bv
    Ccl = -(Minv @ Cx)[sig:sig + 1, :]
    Dcl = -(Minv @ bv)[sig:sig + 1, :]
    return StateSpace(Acl, Bcl, Ccl, Dcl, tuple(owners))


def closed_loop_poles(red: Reduction) -> np.ndarray:
    return np.linalg.eigvals(loop_state_space(red, None).A)


def hidden_modes(red: Reduction, name: str) -> list[tuple[complex, tuple[str, ...]]]:
    """Open-loop RHP modes at break `name` that L_k cannot see (uncontrollable or unobservable)."""
    ss = loop_state_space(red, name)
    if ss.A.size == 0:
        return []
    lam, vecs = np.linalg.eig(ss.A)
    out = []
    scale = max(1.0, np.abs(ss.A).max())
    for i, l in enumerate(lam):
        if l.real <= 1e-9 * max(1.0, abs(l)):
            continue
        n = ss.A.shape[0]
        ctrl = np.linalg.svd(np.hstack([l * np.eye(n) - ss.A, ss.B]), compute_uv=False)[-1]
        obs = np.linalg.svd(np.vstack([l * np.eye(n) - ss.A, ss.C]), compute_uv=False)[-1]
        if min(ctrl, obs) < 1e-8 * scale:
            v = np.abs(vecs[:, i])
            owners = [ss.owners[j] for j in np.argsort(v)[::-1][:3] if v[j] > 0.1 * v.max()]
            # and the blocks whose zeros cancel it
            owners += [inst.term.app.label for inst in red.instances if inst.transfer is not None
                       and np.any(np.abs(inst.transfer.zeros - l) <= 1e-6 * max(1.0, abs(l)))]
            out.append((complex(l), tuple(dict.fromkeys(owners))))
    return out
