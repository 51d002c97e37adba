"""Oracles: combinations of the candidates that look at the true picture (for evaluation only).

They bound what any estimator working on the same candidates could reach, and so separate the two
questions "are the candidates good enough?" and "does the estimator pick the right ones?":

- :func:`best_of_k`: every pixel takes the candidate observation closest to the truth. By
  construction no per-pixel combination that picks one candidate does better, and no convex
  combination of the candidates is further from the truth than the worst one.
- :func:`block_least_squares`: per block of ``block`` x ``block`` luma samples, the weights over the
  K candidates of the block (the K landed vectors nearest to the block's centre) that minimise the
  squared error against the truth (ordinary least squares; the normal equations are solved with a
  tiny ridge so empty candidate slots stay harmless).

Neither is usable by a decoder; they are here so the quality report can show how far the estimator
is from what its candidates allow.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from synth.errors import ParameterError
from synth.field import VectorField
from synth.picture import Picture
from synth.synthesis.candidate_stack import CandidateStack, candidate_stack
from synth.synthesis.lmmse import cholesky_solve_soa
from synth.synthesis.params import SynthParams

__all__ = ["best_of_k", "best_side_of_k", "block_least_squares", "block_least_squares_stack"]


def _truth_plane(stack: CandidateStack, truth) -> np.ndarray:
    y = truth.y if isinstance(truth, Picture) else np.asarray(truth)
    if y.shape != stack.shape:
        raise ParameterError(f"truth has shape {y.shape}, the candidate stack {stack.shape}")
    return y.astype(np.float32)


def best_of_k(stack: CandidateStack, truth) -> np.ndarray:
    """Per pixel, the valid candidate observation closest to the true sample.

    Parameters
    ----------
    stack : CandidateStack
    truth : Picture or ndarray (H, W)

    Returns
    -------
    ndarray of float32, shape (H, W)
        Pixels without any candidate take the co-located average (the synthesiser's fallback).
    """
    y = _truth_plane(stack, truth)
    obs = stack.obs
    err = np.where(stack.valid, np.abs(obs - y[None]), np.float32(np.inf))
    k = np.argmin(err, axis=0)
    best = np.take_along_axis(obs, k[None], axis=0)[0]
    return np.where(stack.valid.any(axis=0), best, stack.colocated)


def best_side_of_k(stack: CandidateStack, truth) -> np.ndarray:
    """Per pixel, the single reference sample (past or future endpoint of any candidate) closest to
    the truth: the bound for estimators that may trust one side only (occlusions)."""
    y = _truth_plane(stack, truth)
    both = np.concatenate([stack.past, stack.future, stack.obs], axis=0)
    valid = np.concatenate([stack.valid, stack.valid, stack.valid], axis=0)
    err = np.where(valid, np.abs(both - y[None]), np.float32(np.inf))
    k = np.argmin(err, axis=0)
    best = np.take_along_axis(both, k[None], axis=0)[0]
    return np.where(stack.valid.any(axis=0), best, stack.colocated)


def block_least_squares_stack(stack: CandidateStack, truth, *, block: int = 8, ridge: float = 1e-4) -> np.ndarray:
    """Least-squares weights per block over the slots of a stack built with ``group == block``.

    Parameters
    ----------
    stack : CandidateStack
        Built with the group size equal to ``block`` (every pixel of a block has the same candidates).
    truth : Picture or ndarray (H, W)
    block : int
    ridge : float
        Added to the diagonal of the normal equations, relative to their mean diagonal.

    Returns
    -------
    ndarray of float32, shape (H, W)
    """
    if stack.group != block:
        raise ParameterError(f"block least squares needs a stack grouped per {block} samples, got group {stack.group}")
    y = _truth_plane(stack, truth).astype(np.float64)
    K, H, W = stack.past.shape
    Hb, Wb = -(-H // block), -(-W // block)
    obs = np.zeros((K, Hb * block, Wb * block), np.float64)
    obs[:, :H, :W] = np.where(stack.valid, stack.obs, 0)
    yy = np.zeros((Hb * block, Wb * block), np.float64)
    yy[:H, :W] = y
    X = obs.reshape(K, Hb, block, Wb, block).transpose(0, 1, 3, 2, 4).reshape(K, Hb * Wb, block * block)
    Y = yy.reshape(Hb, block, Wb, block).transpose(0, 2, 1, 3).reshape(Hb * Wb, block * block)
    A = np.einsum("ipn,jpn->ijp", X, X)  # (K, K, P)
    b = np.einsum("ipn,pn->ip", X, Y)  # (K, P)
    # ridge relative to the mean diagonal; empty slots (zero rows) get weight 0
    x, _ = cholesky_solve_soa(A, b, loading=ridge)
    est = np.einsum("ip,ipn->pn", x, X)
    est = est.reshape(Hb, Wb, block, block).transpose(0, 2, 1, 3).reshape(Hb * block, Wb * block)[:H, :W]
    return np.where(stack.valid.any(axis=0), est, stack.colocated).astype(np.float32)


def block_least_squares(
    past: Picture,
    future: Picture,
    fields: VectorField | Sequence[VectorField],
    truth: Picture,
    *,
    t: float,
    params: SynthParams | None = None,
    block: int = 8,
) -> np.ndarray:
    """Least-squares weights per ``block`` x ``block`` luma block over the K candidates of the block.

    Parameters
    ----------
    past, future, truth : Picture
    fields : VectorField or sequence of VectorField
    t : float
    params : SynthParams, optional
        K and the candidate search as in the synthesiser (the group size is replaced by ``block``).
    block : int

    Returns
    -------
    ndarray of float32, shape (H, W)
        The oracle's luma plane (unrounded).

    Notes
    -----
    Ordinary least squares per block (the normal equations, e.g. G. H. Golub and C. F. Van Loan,
    Matrix Computations, 4th ed., 2013, section 5.3), solved batched with the synthesiser's
    Cholesky solver.
    """
    st = candidate_stack(past, future, fields, t=t, params=params, group=block)
    return block_least_squares_stack(st, truth, block=block)
