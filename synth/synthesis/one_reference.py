r"""One-reference prediction: a picture from its reference and its own coded block vectors, by a
per-pixel LMMSE combination of the vectors of the blocks around each pixel.

Block motion compensation (block MC) predicts every pixel with the one vector of the block it lies
in. Overlapped block motion compensation (OBMC) blends the predictions of neighbouring blocks' vectors
with a fixed window (M. T. Orchard and G. J. Sullivan, "Overlapped block motion compensation: an
estimation-theoretic approach", IEEE Trans. Image Processing 3(5), 693-699, 1994). This module
weighs the neighbouring vectors per pixel by an optimal linear estimator whose weights follow from
where the pixel lies relative to each block and from how much the vectors disagree; nothing is
sent for it.

Model
-----
Pixel ``p`` (integer luma position) of the coded picture, candidate blocks ``i = 1 .. K``: the
pixel's own block first, then the K - 1 other inter blocks whose centres lie nearest to the pixel's
group of ``group`` x ``group`` samples (`synth.synthesis.candidates.CandidateSearch`). Block ``i``
has the centre ``c_i``, the size ``(w_i, h_i)`` and the vector ``v_i`` (luma samples). Its
observation is the reference sample the vector points at from ``p``::

    o_i = ref(p + v_i)

sampled with the codec's own interpolation (ITU-T H.264 clause 8.4.2.2, as block MC in
`synth.motion.compensate`), so that one candidate gives block MC exactly.

1. Spatial correlation. The reference is a first-order Markov field with correlation ``a`` per
   luma sample (``spatial_correlation``): two samples ``d`` apart correlate as ``a^d``, so two
   observations correlate as::

       R_ij = a^{|v_i - v_j|}        (R_ii = 1)

   (Euclidean distance between the vectors in luma samples).

2. Reliability. A vector was chosen for the pixels inside its block; it fits a pixel less the
   further the pixel lies from the block's centre, and less again outside the block::

       q_i(p) = exp(-beta u_i^2) * (gamma if p lies outside block i else 1),
       u_i^2 = ((p_x - c_ix) / w_i)^2 + ((p_y - c_iy) / h_i)^2

   ``beta`` is the ``reliability_decay``, ``gamma`` the ``outside_factor`` (distances in units of
   the block's size, so a block of any size decays alike).

3. Cross-correlation. The true motion of ``p`` is taken to be one of the candidate vectors,
   candidate ``j`` with probability ``pi_j = q_j / sum_k q_k``. The true match ``y = ref(p + v*)``
   then lies at the expected distance ``e_i = sum_j pi_j |v_i - v_j|`` from observation ``i``, and::

       r_i = a^{e_i}

4. Weights and estimate. The LMMSE weights solve ``R w = r`` (the Wiener-Hopf equations; S. M. Kay,
   Fundamentals of Statistical Signal Processing: Estimation Theory, 1993, ch. 12), with diagonal
   ``loading`` (relative, as in `synth.synthesis.lmmse.cholesky_solve_soa`) since neighbouring blocks
   often carry the same vector. They are applied around the reliability-weighted mean
   ``m = sum_i pi_i o_i`` of the observations::

       y_hat = m + sum_i w_i (o_i - m) = sum_i c_i o_i,   c_i = w_i + (1 - sum_k w_k) pi_i

   so the coefficients ``c`` sum to one (the local mean is kept), one candidate gives ``o_1`` and
   identical vectors give their common sample. With ``fallback='own'`` the weights are applied
   around the own block's observation instead (``c_1 = w_1 + 1 - sum_k w_k``); on carphone and
   bikes the two differ by under 0.01 dB, since the weights sum to nearly one.

Pixels of intra blocks, and pixels no block covers, have no own vector: their candidates are the
K nearest inter blocks (all "outside"); only a picture without any inter block falls back to the
co-located reference sample. (Block MC takes the co-located sample there, so on pictures with
intra blocks the two differ most in those areas: `synth.evaluation.prediction` reports the PSNR
over the inter blocks' pixels too.) Chroma uses the luma coefficients of its co-sited luma
sample and the luma vectors scaled to its grid (bilinear, ITU-T H.264 clause 8.4.2.2.2).

Several reference pictures
--------------------------
When the blocks point at different reference pictures ``t_0 .. t_{N-1}`` (nearest first;
`synth.motion.multi_reference.ReferenceFields`: one field per reference on one block grid, each
block inter in one of them), observation ``i`` samples its own reference with its own vector::

    o_i = ref_{k_i}(p + v_i)

but the distances of equations 1 and 3 are measured between vectors mapped onto a common
reference through the chain of coded vectors (`synth.synthesis.reference_chain`:
``v_i^{(m)} = v_i + sum_k u_k(...)``, composed from each reference picture's own field against the
next older one). The common reference of pixel ``p`` is the oldest reference among its own
candidates, ``m(p) = max_i k_i``::

    R_ij = a^{|v_i^{(m)} - v_j^{(m)}|},    e_i = sum_j pi_j |v_i^{(m)} - v_j^{(m)}|

so two blocks that follow the same motion to different references count as agreeing, and a pixel
whose candidates all point at one reference compares them as coded (the chain's own errors enter
only where references mix). All of a pixel's distances are measured in one plane, so ``R`` stays
an exponential kernel of points, positive definite (a pairwise choice, each pair on the older of
its two references, mixes planes and is not; measured: several dB lost). One common reference for
the whole picture (the oldest any block uses, ``distances='oldest'``) is the other choice
(`tests/benchmarks/results/one-reference-quality.md` compares the three).

The candidate search, the reliabilities and the coefficients are those of the one-reference case
(block centres and sizes are the same whatever the reference), so with all blocks on one
reference nothing changes (`predict_multi_reference`; one reference: `predict_one_reference`
exactly). The fields of x264's exported vectors name no reference (FFmpeg's ``AVMotionVector``
carries only a direction), so several references come from the built-in estimator.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields

import numpy as np

from synth.errors import FormatError, ParameterError
from synth.field import VectorField
from synth.motion.subpel import QuarterPelReference, chroma_bilinear
from synth.picture import Picture
from synth.synthesis.candidates import CandidateSearch
from synth.synthesis.lmmse import cholesky_solve_soa
from synth.synthesis.project import LandedVectors

__all__ = [
    "OneReferenceParams",
    "ONE_REFERENCE_FORMAT",
    "one_reference_coefficients",
    "predict_one_reference",
    "predict_multi_reference",
    "multi_reference_coefficients",
    "sample_with_references",
    "sample_with_vector_maps",
    "own_block_map",
    "correlation_system",
]

#: ``format`` of the parameter file (same envelope as the synthesis parameter file).
ONE_REFERENCE_FORMAT = "synth-one-reference-params"
#: What the weights are applied around: the reliability-weighted mean of the observations, or the
#: own block's observation (block MC).
FALLBACKS = ("mean", "own")
#: Rows of pixels solved at once (bounds the memory of the K x K systems).
_STRIPE_ROWS = 64


@dataclass(frozen=True)
class OneReferenceParams:
    """Parameters of the one-reference LMMSE predictor (symbols of the module docstring).

    Parameters
    ----------
    spatial_correlation : float
        ``a`` in (0, 1): correlation of two reference samples one luma sample apart.
    reliability_decay : float
        ``beta`` >= 0: a vector's reliability is ``exp(-beta u^2)``, ``u`` the pixel's distance from
        the block's centre in units of the block's size.
    outside_factor : float
        ``gamma`` in (0, 1]: extra factor of a vector's reliability outside its block.
    candidates : int
        ``K``, 1..16: the pixel's own block plus the K - 1 nearest other inter blocks.
    loading : float
        Diagonal loading of ``R`` (relative to its mean diagonal), >= 0.
    group : int
        Candidates are searched per square group of this many luma samples (a power of two, 1..16;
        the coefficients stay per pixel).
    reach : float
        Largest distance (luma samples) from a group's centre to a candidate block's centre.
    fallback : {'mean', 'own'}
        What the weights are applied around (module docstring, equation 4).
    """

    # calibrated (tests/benchmarks/one_reference_calibration.py: carphone, bikes, bigbuckbunny,
    # pictures 1..2 each against the one before, estimated vectors; the best of the grid)
    spatial_correlation: float = 0.8
    reliability_decay: float = 2.0
    outside_factor: float = 0.25
    candidates: int = 5
    loading: float = 0.01
    group: int = 4
    reach: float = 48.0
    fallback: str = "mean"

    def __post_init__(self) -> None:
        a = self.spatial_correlation
        if not (isinstance(a, (int, float)) and 0.0 < a < 1.0):
            raise ParameterError(f"spatial_correlation must be in (0, 1), got {a!r}")
        b = self.reliability_decay
        if not (isinstance(b, (int, float)) and math.isfinite(b) and b >= 0):
            raise ParameterError(f"reliability_decay must be a finite number >= 0, got {b!r}")
        g = self.outside_factor
        if not (isinstance(g, (int, float)) and 0.0 < g <= 1.0):
            raise ParameterError(f"outside_factor must be in (0, 1], got {g!r}")
        k = self.candidates
        if isinstance(k, bool) or not isinstance(k, int) or not 1 <= k <= 16:
            raise ParameterError(f"candidates must be an integer 1..16, got {k!r}")
        lo = self.loading
        if not (isinstance(lo, (int, float)) and math.isfinite(lo) and lo >= 0):
            raise ParameterError(f"loading must be a finite number >= 0, got {lo!r}")
        gr = self.group
        if isinstance(gr, bool) or not isinstance(gr, int) or not 1 <= gr <= 16 or gr & (gr - 1):
            raise ParameterError(f"group must be a power of two 1..16, got {gr!r}")
        if self.fallback not in FALLBACKS:
            raise ParameterError(f"fallback must be one of {', '.join(FALLBACKS)}, got {self.fallback!r}")
        r = self.reach
        if not (isinstance(r, (int, float)) and math.isfinite(r) and r > 0):
            raise ParameterError(f"reach must be a finite number > 0, got {r!r}")

    def to_dict(self) -> dict:
        """The parameters as a plain dict."""
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict, *, source: str = "parameters") -> OneReferenceParams:
        """Parameters from a dict; missing names take the defaults, unknown names are refused."""
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(data) - known)
        if unknown:
            raise FormatError(f"{source}: unknown one-reference parameter(s) {', '.join(unknown)}")
        try:
            return cls(**data)
        except ParameterError as exc:
            raise FormatError(f"{source}: {exc}") from None

    def to_json(self) -> str:
        """The parameter file's text: ``{"format", "schema_version", "params"}``."""
        from synth.io.jsonout import dumps_strict

        return dumps_strict({"format": ONE_REFERENCE_FORMAT, "schema_version": 1, "params": self.to_dict()}, indent=2)

    @classmethod
    def load(cls, path) -> OneReferenceParams:
        """Parameters from a parameter file (`FormatError` naming the file when it is wrong)."""
        from synth.io.jsonread import read_text_document

        return cls.from_json(read_text_document(path, what="parameter file"), source=str(path))

    @classmethod
    def from_json(cls, text: str, *, source: str = "parameters") -> OneReferenceParams:
        """Parameters from a parameter file's text (see :meth:`to_json`)."""
        from synth.io.jsonread import parse_json_text

        doc = parse_json_text(text, source=source)
        if not isinstance(doc, dict) or doc.get("format") != ONE_REFERENCE_FORMAT:
            raise FormatError(f"{source}: not a one-reference parameter file (format {ONE_REFERENCE_FORMAT!r})")
        if doc.get("schema_version") != 1:
            raise FormatError(f"{source}: schema_version must be 1, got {doc.get('schema_version')!r}")
        params = doc.get("params", {})
        if not isinstance(params, dict):
            raise FormatError(f"{source}: 'params' must be an object")
        return cls.from_dict(params, source=source)


def own_block_map(field: VectorField) -> tuple[np.ndarray, np.ndarray]:
    """Index of each sample's inter block among the field's inter blocks.

    Returns
    -------
    own : ndarray of int32, shape (height, width)
        Index into ``np.flatnonzero(~field.intra)``; -1 for intra or uncovered samples.
    inter : ndarray of int64, shape (n,)
        The field's inter block indices.
    """
    own = np.full((field.height, field.width), -1, np.int32)
    inter = np.flatnonzero(~np.asarray(field.intra, bool))
    for n, (x, y, w, h) in enumerate(
        zip(field.x[inter].tolist(), field.y[inter].tolist(), field.w[inter].tolist(), field.h[inter].tolist())
    ):
        own[max(y, 0) : y + h, max(x, 0) : x + w] = n
    return own, inter


def _landed(field: VectorField, inter: np.ndarray) -> LandedVectors:
    """The inter blocks as `LandedVectors` (centre and vector) for the candidate search."""
    x = field.x[inter].astype(np.float32)
    y = field.y[inter].astype(np.float32)
    w = field.w[inter].astype(np.int32)
    h = field.h[inter].astype(np.int32)
    zero = np.zeros(len(inter), np.float32)
    return LandedVectors(
        x + (w - 1) / np.float32(2), y + (h - 1) / np.float32(2), w, h,
        field.dx[inter].astype(np.float32) / 4, field.dy[inter].astype(np.float32) / 4, zero, zero,
        np.zeros(len(inter), np.int32), inter.astype(np.int32),
        past_time=float(field.reference_time), future_time=float(field.coded_time),
        target_time=float(field.coded_time), t=1.0,
    )  # fmt: skip


def one_reference_coefficients(
    field: VectorField, *, params: OneReferenceParams | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-pixel candidate vectors and their coefficients ``c_i`` (module docstring, equation 4).

    Parameters
    ----------
    field : VectorField
        The coded picture's blocks and quarter-sample vectors against its reference.
    params : OneReferenceParams, optional

    Returns
    -------
    qx, qy : ndarray of int32, shape (K, height, width)
        Quarter-sample vector of each pixel's candidate in each slot (slot 0: its own block, or the
        nearest inter block for intra and uncovered pixels; 0 in empty slots).
    coefficients : ndarray of float32, shape (K, height, width)
        ``c_i``; they sum to one per pixel. Empty slots hold 0; intra and uncovered pixels take
        the nearest inter blocks (a field without any holds ``(1, 0, ..., 0)`` with a zero vector:
        the co-located sample).
    """
    qx, qy, coef, _ = _coefficients(field, params or OneReferenceParams())
    return qx, qy, coef


def _coefficients(
    field: VectorField,
    p: OneReferenceParams,
    distance: tuple[np.ndarray, np.ndarray] | None = None,
    level: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """`one_reference_coefficients`, with the vectors the distances are measured between and each
    slot's inter block (index into ``np.flatnonzero(~field.intra)``, -1 in empty slots) returned.

    `distance`: quarter-sample (dx, dy), shape (n,) per block of `field` (default: the field's own
    vectors), or shape (N, n) with `level` (each block's reference index, shape (n,)): every
    block's vector mapped onto each reference, a pixel's candidates compared on the oldest
    reference among them.
    """
    H, W, K = field.height, field.width, p.candidates
    own, inter = own_block_map(field)
    qx = np.zeros((K, H, W), np.int32)
    qy = np.zeros((K, H, W), np.int32)
    coef = np.zeros((K, H, W), np.float32)
    coef[0] = 1.0
    slot = np.full((K, H, W), -1, np.int32)
    if len(inter) == 0:
        return qx, qy, coef, slot
    landed = _landed(field, inter)
    bdx = field.dx[inter].astype(np.int32)
    bdy = field.dy[inter].astype(np.int32)
    if distance is not None:
        ddx = np.asarray(distance[0])[..., inter].astype(np.int32)
        ddy = np.asarray(distance[1])[..., inter].astype(np.int32)
    if level is not None:
        blevel = np.asarray(level)[inter].astype(np.int64)
    bx = field.x[inter].astype(np.float32)
    by = field.y[inter].astype(np.float32)
    bw = field.w[inter].astype(np.float32)
    bh = field.h[inter].astype(np.float32)
    search = CandidateSearch(landed, height=H, width=W, k=K, group=p.group, reach=p.reach)
    log_gamma = np.float32(np.log(p.outside_factor))
    beta = np.float32(p.reliability_decay)
    g = p.group
    rows_per = max(1, _STRIPE_ROWS // g)
    for gy0 in range(0, search.rows, rows_per):
        gy1 = min(search.rows, gy0 + rows_per)
        y0, y1 = gy0 * g, min(H, gy1 * g)
        near = search.for_group_rows(gy0, gy1)  # (gr, cols, K)
        # per pixel: broadcast the group's candidates
        near = np.repeat(np.repeat(near, g, axis=0), g, axis=1)[: y1 - y0, :W]  # (rows, W, K)
        mine = own[y0:y1]  # (rows, W)
        slots = _own_first(mine, near, K)  # (rows, W, K), -1 empty
        rows = y1 - y0
        P = rows * W
        idx = np.moveaxis(slots, -1, 0).reshape(K, P)  # (K, P)
        valid = idx >= 0
        safe = np.where(valid, idx, 0)
        px = np.broadcast_to(np.arange(W, dtype=np.float32)[None, :], (rows, W)).reshape(P)
        py = np.broadcast_to(np.arange(y0, y1, dtype=np.float32)[:, None], (rows, W)).reshape(P)
        # reliability q_i (equation 2), in logs
        ux = (px[None, :] - (bx[safe] + (bw[safe] - 1) / 2)) / bw[safe]
        uy = (py[None, :] - (by[safe] + (bh[safe] - 1) / 2)) / bh[safe]
        outside = (px[None, :] < bx[safe]) | (px[None, :] >= bx[safe] + bw[safe])
        outside |= (py[None, :] < by[safe]) | (py[None, :] >= by[safe] + bh[safe])
        logq = -beta * (ux * ux + uy * uy) + np.where(outside, log_gamma, np.float32(0))
        logq = np.where(valid, logq, np.float32(-1e30))  # empty slots: q = 0 (finite, no NaN)
        logq -= logq.max(axis=0, keepdims=True)
        q = np.exp(logq)
        pi = q / q.sum(axis=0, keepdims=True)  # (K, P)
        vx = np.where(valid, bdx[safe], 0)
        vy = np.where(valid, bdy[safe], 0)
        if distance is None:
            fx = vx.astype(np.float32) / 4
            fy = vy.astype(np.float32) / 4
        elif level is None:  # vectors mapped onto the common reference (synth.synthesis.reference_chain)
            fx = np.where(valid, ddx[safe], 0).astype(np.float32) / 4
            fy = np.where(valid, ddy[safe], 0).astype(np.float32) / 4
        else:  # per pixel on the oldest reference among its candidates (one space: R stays positive definite)
            m = np.where(valid, blevel[safe], 0).max(axis=0)
            at = np.broadcast_to(m[None, None, :], (1, K, P))
            fx = np.where(valid, np.take_along_axis(ddx[:, safe], at, axis=0)[0], 0).astype(np.float32) / 4
            fy = np.where(valid, np.take_along_axis(ddy[:, safe], at, axis=0)[0], 0).astype(np.float32) / 4
        R, r = correlation_system(fx, fy, pi, valid, spatial_correlation=p.spatial_correlation)
        w, _ = cholesky_solve_soa(R, r, loading=p.loading)
        rest = np.float32(1) - w.sum(axis=0, keepdims=True)
        if p.fallback == "own":
            c = w.copy()
            c[0] += rest[0]
        else:
            c = w + rest * pi
        c = np.where(valid, c, np.float32(0))
        no_block = ~valid.any(axis=0)
        c[:, no_block] = 0
        c[0, no_block] = 1
        coef[:, y0:y1] = c.reshape(K, rows, W)
        qx[:, y0:y1] = vx.reshape(K, rows, W)
        qy[:, y0:y1] = vy.reshape(K, rows, W)
        slot[:, y0:y1] = idx.reshape(K, rows, W)
    return qx, qy, coef, slot


def correlation_system(
    vx: np.ndarray, vy: np.ndarray, pi: np.ndarray, valid: np.ndarray, *, spatial_correlation: float
) -> tuple[np.ndarray, np.ndarray]:
    """The matrices ``R`` and ``r`` of every pixel (module docstring, equations 1 and 3).

    Parameters
    ----------
    vx, vy : ndarray of float32, shape (K, P)
        Candidate vectors in luma samples, K slots for P pixels.
    pi : ndarray of float32, shape (K, P)
        Probability of each candidate being the true motion (0 in empty slots).
    valid : ndarray of bool, shape (K, P)
        Slots holding a candidate (empty ones get an identity row and ``r = 0``).
    spatial_correlation : float
        ``a``.

    Returns
    -------
    R : ndarray of float32, shape (K, K, P)
        ``a^{|v_i - v_j|}`` (structure-of-arrays, as `synth.synthesis.lmmse.cholesky_solve_soa` takes).
    r : ndarray of float32, shape (K, P)
        ``a^{e_i}``, ``e_i = sum_j pi_j |v_i - v_j|``.
    """
    K, P = vx.shape
    log_a = np.float32(np.log(spatial_correlation))
    vx = np.asarray(vx, np.float32)
    vy = np.asarray(vy, np.float32)
    pi = np.asarray(pi, np.float32)
    R = np.zeros((K, K, P), np.float32)
    expected = np.zeros((K, P), np.float32)
    for i in range(K):
        R[i, i] = 1.0
        for j in range(i + 1, K):  # symmetric: each pair once
            d = np.hypot(vx[i] - vx[j], vy[i] - vy[j])
            R[i, j] = np.where(valid[i] & valid[j], np.exp(log_a * d), np.float32(0))
            R[j, i] = R[i, j]
            expected[i] += pi[j] * d
            expected[j] += pi[i] * d
    r = np.where(valid, np.exp(log_a * expected), np.float32(0)).astype(np.float32)
    return R, r


def _own_first(own: np.ndarray, near: np.ndarray, k: int) -> np.ndarray:
    """Slots per pixel: the own block first, then the nearest others (own removed), -1 empty.

    A pixel without an own block (intra, uncovered) gets the K nearest inter blocks.
    """
    # the k-d tree lists a block at most once, nearest first, empty slots (-1) last: drop the own
    # block where it appears, else the farthest neighbour
    dup = near == own[..., None]
    at = np.where(dup.any(axis=-1), dup.argmax(axis=-1), k)
    t = np.arange(k - 1)
    packed = np.take_along_axis(near, t + (t >= at[..., None]), axis=-1)
    out = np.concatenate([own[..., None], packed], axis=-1).astype(np.int32)
    loose = own < 0
    out[loose] = np.where(near[loose] >= 0, near[loose], -1)[..., :k]  # nearest first, none removed
    return out


def sample_with_vector_maps(reference: Picture, qx: np.ndarray, qy: np.ndarray, coefficients: np.ndarray) -> Picture:
    """``sum_i c_i ref(p + v_i)`` per pixel with the H.264 interpolation of block MC.

    Parameters
    ----------
    reference : Picture
    qx, qy : ndarray of int, shape (K, height, width)
        Quarter-sample luma vectors per slot.
    coefficients : ndarray of float, shape (K, height, width)
        Weights per slot (zero slots are skipped where all their weights are zero).

    Returns
    -------
    Picture
        Rounded half up and clipped to the sample range.

    Notes
    -----
    Luma: ITU-T H.264 clause 8.4.2.2.1 (`synth.motion.subpel.QuarterPelReference`); chroma:
    clause 8.4.2.2.2 (`synth.motion.subpel.chroma_bilinear`), vectors at 1 / (4 subsampling)
    chroma sample, coefficients of the co-sited luma sample.
    """
    _check_maps(reference, qx, qy, coefficients)
    return Picture.from_float(
        _weighted_planes(reference, qx, qy, coefficients), chroma_format=reference.chroma_format,
        bit_depth=reference.bit_depth,
    )  # fmt: skip


def _check_maps(reference: Picture, qx: np.ndarray, qy: np.ndarray, coefficients: np.ndarray) -> None:
    H, W = reference.height, reference.width
    if qx.shape[1:] != (H, W) or qy.shape != qx.shape or coefficients.shape != qx.shape:
        raise ParameterError(f"vector and coefficient maps must have shape (K, {H}, {W}), got {qx.shape}")


def _weighted_planes(reference: Picture, qx: np.ndarray, qy: np.ndarray, coefficients: np.ndarray) -> list:
    """The unrounded planes (float64) of `sample_with_vector_maps`."""
    H, W = reference.height, reference.width
    bd = reference.bit_depth
    reach = int(max(np.abs(qx).max(initial=0), np.abs(qy).max(initial=0))) // 4 + 3
    pad = min(reach, max(H, W) + 3)
    ref = QuarterPelReference(reference.y, pad=pad, bit_depth=bd, dtype=np.int32)
    hp = ref.plane_size // ref.stride
    xs = np.arange(W, dtype=np.int64)[None, :]
    ys = np.arange(H, dtype=np.int64)[:, None]
    used = [k for k in range(qx.shape[0]) if np.any(coefficients[k])]
    luma = np.zeros((H, W), np.float64)
    for k in used:
        col = np.clip(xs + pad + (qx[k].astype(np.int64) >> 2), 0, ref.stride - 1)
        row = np.clip(ys + pad + (qy[k].astype(np.int64) >> 2), 0, hp - 1)
        phase = (qy[k].astype(np.int64) & 3) * 4 + (qx[k].astype(np.int64) & 3)
        luma += coefficients[k] * ref.flat.take(phase * ref.plane_size + row * ref.stride + col)
    planes = [luma]
    if reference.chroma_format != "mono":
        fx, fy = reference.chroma_factors
        ch, cw = reference.cb.shape
        for plane in (reference.cb, reference.cr):
            acc = np.zeros((ch, cw), np.float64)
            for k in used:
                cx = qx[k][::fy, ::fx][:ch, :cw]
                cy = qy[k][::fy, ::fx][:ch, :cw]
                ck = coefficients[k][::fy, ::fx][:ch, :cw]
                if fx == 1 and fy == 1:
                    sub = QuarterPelReference(plane, pad=pad, bit_depth=bd, dtype=np.int32)
                    col = np.clip(xs + pad + (cx.astype(np.int64) >> 2), 0, sub.stride - 1)
                    row = np.clip(ys + pad + (cy.astype(np.int64) >> 2), 0, hp - 1)
                    ph = (cy.astype(np.int64) & 3) * 4 + (cx.astype(np.int64) & 3)
                    samples = sub.flat.take(ph * sub.plane_size + row * sub.stride + col)
                else:
                    samples = chroma_bilinear(plane, cx, cy, den_x=4 * fx, den_y=4 * fy, bit_depth=bd)
                acc += ck * samples
            planes.append(acc)
    return planes


def sample_with_references(
    references, reference_index: np.ndarray, qx: np.ndarray, qy: np.ndarray, coefficients: np.ndarray
) -> Picture:
    """`sample_with_vector_maps` with a reference picture per slot and pixel.

    Parameters
    ----------
    references : sequence of Picture
        Same format each.
    reference_index : ndarray of int, shape (K, height, width)
        Index into `references` of the picture each slot samples.
    qx, qy, coefficients : ndarray, shape (K, height, width)
        As `sample_with_vector_maps`.

    Returns
    -------
    Picture
        ``sum_i c_i ref_{k_i}(p + v_i)``, rounded once (half up) and clipped; with one reference
        exactly `sample_with_vector_maps`.
    """
    references = list(references)
    if len(references) == 1:
        return sample_with_vector_maps(references[0], qx, qy, coefficients)
    first = references[0]
    _check_maps(first, qx, qy, coefficients)
    total = None
    for k, ref in enumerate(references):
        mask = reference_index == k
        if k and not mask.any():
            continue
        planes = _weighted_planes(ref, qx, qy, np.where(mask, coefficients, np.float32(0)))
        total = planes if total is None else [a + b for a, b in zip(total, planes)]
    return Picture.from_float(total, chroma_format=first.chroma_format, bit_depth=first.bit_depth)


#: How vectors to different references are compared (`multi_reference_coefficients`).
DISTANCES = ("pixel", "oldest", "coded")


def multi_reference_coefficients(
    fields, *, params: OneReferenceParams | None = None, distances: str = "pixel"
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """`one_reference_coefficients` for blocks on several references (module docstring, "Several
    reference pictures").

    Parameters
    ----------
    fields : synth.motion.multi_reference.ReferenceFields
    params : OneReferenceParams, optional
    distances : {'pixel', 'oldest', 'coded'}
        Where the distances of a pixel's candidate vectors are measured (module docstring,
        "Several reference pictures"): ``pixel`` (the model) on the oldest reference among the
        pixel's candidates, ``oldest`` on the oldest reference any block of the picture uses,
        ``coded`` between the vectors as coded (these two only to measure the choice).

    Returns
    -------
    qx, qy, coefficients : ndarray, shape (K, height, width)
        Each slot's own vector (to its own reference) and coefficient.
    reference_index : ndarray of int32, shape (K, height, width)
        Index into ``fields.fields`` of the reference each slot samples (0 in empty slots).
    """
    from synth.synthesis.reference_chain import common_reference_vectors, vectors_on_every_reference

    if distances not in DISTANCES:
        raise ParameterError(f"distances must be one of {', '.join(DISTANCES)}, got {distances!r}")
    p = params or OneReferenceParams()
    merged = fields.merged()
    which = fields.block_reference()
    distance, level = None, None
    if distances == "oldest":
        mx, my, common = common_reference_vectors(fields)
        distance = None if common == 0 else (mx, my)
    elif distances == "pixel" and len({int(k) for k in which[which >= 0]}) > 1:
        distance = vectors_on_every_reference(fields)
        level = np.maximum(which, 0)
    qx, qy, coef, slot = _coefficients(merged, p, distance, level)
    of_inter = which[np.flatnonzero(~np.asarray(merged.intra, bool))]
    if len(of_inter) == 0:
        return qx, qy, coef, np.zeros(slot.shape, np.int32)
    ref_index = np.where(slot >= 0, of_inter[np.maximum(slot, 0)], 0).astype(np.int32)
    return qx, qy, coef, ref_index


def predict_multi_reference(
    references, fields, *, params: OneReferenceParams | None = None, distances: str = "pixel"
) -> Picture:
    """Predict the coded picture of `fields` (a `synth.motion.multi_reference.ReferenceFields`) from
    its reference pictures (nearest first, one per field): the LMMSE combination with distances
    measured on the common reference (module docstring, "Several reference pictures").

    With one reference it is `predict_one_reference` exactly. `distances`: where vectors to
    different references are compared (`multi_reference_coefficients`).

    Raises
    ------
    ParameterError
        When the number of pictures differs from the number of fields, or a size differs.
    """
    references = list(references)
    if len(references) != len(fields):
        raise ParameterError(f"{len(fields)} fields need {len(fields)} reference pictures, got {len(references)}")
    if len(references) == 1:
        return predict_one_reference(references[0], fields.fields[0], params=params)
    first = fields.fields[0]
    for ref in references:
        if (first.width, first.height) != (ref.width, ref.height):
            raise ParameterError(
                f"fields are for {first.width}x{first.height} pictures, a reference is {ref.width}x{ref.height}"
            )
    qx, qy, coef, ref_index = multi_reference_coefficients(fields, params=params, distances=distances)
    return sample_with_references(references, ref_index, qx, qy, coef)


def predict_one_reference(
    reference: Picture, field: VectorField, *, params: OneReferenceParams | None = None
) -> Picture:
    """Predict the coded picture of `field` from `reference` by the per-pixel LMMSE combination of
    the vectors of the blocks around each pixel (module docstring).

    Parameters
    ----------
    reference : Picture
        The picture the field's vectors point at.
    field : VectorField
        The coded picture's blocks and vectors (sign convention of `synth.field`).
    params : OneReferenceParams, optional
        ``a``, ``beta``, ``gamma``, ``K`` and the loading; defaults when omitted.

    Returns
    -------
    Picture
        Same format as `reference`.

    Raises
    ------
    ParameterError
        When the field's picture size differs from the reference's.

    References
    ----------
    .. [1] S. M. Kay, Fundamentals of Statistical Signal Processing: Estimation Theory, Prentice
       Hall, 1993, ch. 12 (linear Bayesian estimators).
    .. [2] M. T. Orchard and G. J. Sullivan, "Overlapped block motion compensation: an
       estimation-theoretic approach", IEEE Trans. Image Processing 3(5), 693-699, 1994.

    Examples
    --------
    >>> import numpy as np
    >>> from synth.field import VectorField
    >>> ref = Picture(np.arange(256, dtype=np.uint8).reshape(16, 16), None, None, "mono", 8)
    >>> f = VectorField.uniform_grid(16, 16, block=8, coded_time=1, reference_time=0, dx=4)
    >>> int(predict_one_reference(ref, f).y[0, 0])  # one sample to the right
    1
    """
    if (field.width, field.height) != (reference.width, reference.height):
        raise ParameterError(
            f"field is for {field.width}x{field.height} pictures, reference is {reference.width}x{reference.height}"
        )
    qx, qy, coef = one_reference_coefficients(field, params=params)
    return sample_with_vector_maps(reference, qx, qy, coef)
