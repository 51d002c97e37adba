"""The `Picture` model: one decoded picture as planar Y, Cb, Cr sample arrays.

Samples stay integer (``uint8`` for 8-bit, ``uint16`` for 9..16-bit) in a `Picture`; computation
happens on float32 planes obtained with :meth:`Picture.to_float` and brought back with
:meth:`Picture.from_float`, which rounds half up (add 0.5, floor) and clips to
``[0, 2**bit_depth - 1]``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from synth.errors import ParameterError

__all__ = ["CHROMA_FORMATS", "Picture", "ClipInfo", "chroma_shape", "chroma_factors"]

#: Chroma formats and their (horizontal, vertical) subsampling factors.
CHROMA_FORMATS: dict[str, tuple[int, int]] = {
    "420": (2, 2),
    "422": (2, 1),
    "444": (1, 1),
    "mono": (1, 1),
}


def chroma_factors(chroma_format: str) -> tuple[int, int]:
    """Return the (horizontal, vertical) chroma subsampling factors of a chroma format."""
    try:
        return CHROMA_FORMATS[chroma_format]
    except KeyError:
        raise ParameterError(
            f"unknown chroma format {chroma_format!r}; expected one of {', '.join(CHROMA_FORMATS)}"
        ) from None


def chroma_shape(height: int, width: int, chroma_format: str) -> tuple[int, int] | None:
    """Chroma plane shape ``(height, width)`` for a luma size, or None for monochrome.

    Odd luma sizes round up, as in ITU-T H.264 / H.265 and FFmpeg's pixel formats.
    """
    if chroma_format == "mono":
        return None
    fx, fy = chroma_factors(chroma_format)
    return (-(-height // fy), -(-width // fx))


def _sample_dtype(bit_depth: int) -> np.dtype:
    return np.dtype(np.uint8) if bit_depth <= 8 else np.dtype(np.uint16)


@dataclass(frozen=True, eq=False)
class Picture:
    """A picture as planar integer samples.

    Parameters
    ----------
    y : ndarray of uint8 or uint16, shape (height, width)
        Luma plane.
    cb, cr : ndarray of the same dtype, shape per `chroma_shape`, or None for monochrome
        Chroma planes.
    chroma_format : {'420', '422', '444', 'mono'}
    bit_depth : int, 8..16
    """

    y: np.ndarray
    cb: np.ndarray | None
    cr: np.ndarray | None
    chroma_format: str = "420"
    bit_depth: int = 8

    def __post_init__(self) -> None:
        if not 8 <= int(self.bit_depth) <= 16:
            raise ParameterError(f"bit_depth must be 8..16, got {self.bit_depth}")
        dtype = _sample_dtype(self.bit_depth)
        if self.y.ndim != 2:
            raise ParameterError(f"luma plane must be 2-D, got shape {self.y.shape}")
        expected = chroma_shape(*self.y.shape, self.chroma_format)
        planes = (("y", self.y), ("cb", self.cb), ("cr", self.cr))
        for name, plane in planes:
            if name != "y":
                if expected is None:
                    if plane is not None:
                        raise ParameterError(f"monochrome picture must not carry a {name} plane")
                    continue
                if plane is None or plane.shape != expected:
                    got = None if plane is None else plane.shape
                    raise ParameterError(
                        f"{name} plane of a {self.chroma_format} picture of {self.width}x{self.height} "
                        f"must have shape {expected}, got {got}"
                    )
            if plane.dtype != dtype:
                raise ParameterError(
                    f"{name} plane of a {self.bit_depth}-bit picture must be {dtype}, got {plane.dtype}"
                )

    # -- geometry -----------------------------------------------------------------------------
    @property
    def height(self) -> int:
        return int(self.y.shape[0])

    @property
    def width(self) -> int:
        return int(self.y.shape[1])

    @property
    def max_value(self) -> int:
        return (1 << int(self.bit_depth)) - 1

    @property
    def planes(self) -> tuple[np.ndarray, ...]:
        """The planes present: ``(y,)`` for monochrome, else ``(y, cb, cr)``."""
        if self.chroma_format == "mono":
            return (self.y,)
        return (self.y, self.cb, self.cr)  # type: ignore[return-value]

    @property
    def chroma_factors(self) -> tuple[int, int]:
        return chroma_factors(self.chroma_format)

    def same_format(self, other: Picture) -> bool:
        """True when `other` has the same size, chroma format and bit depth."""
        return (
            self.y.shape == other.y.shape
            and self.chroma_format == other.chroma_format
            and self.bit_depth == other.bit_depth
        )

    # -- float conversion ---------------------------------------------------------------------
    def to_float(self, dtype=np.float32) -> tuple[np.ndarray, ...]:
        """Planes as floating point arrays in sample units (0 .. 2**bit_depth - 1)."""
        return tuple(p.astype(dtype) for p in self.planes)

    @classmethod
    def from_float(
        cls, planes: tuple[np.ndarray, ...] | list[np.ndarray], *, chroma_format: str, bit_depth: int
    ) -> Picture:
        """Build a picture from float planes: round half up, clip to the sample range.

        NaN never reaches a picture: it raises `ParameterError`.
        """
        dtype = _sample_dtype(bit_depth)
        top = (1 << bit_depth) - 1
        out = []
        for p in planes:
            p = np.asarray(p)
            if not np.all(np.isfinite(p)):
                raise ParameterError("a plane holds NaN or infinite samples")
            out.append(np.clip(np.floor(p + 0.5), 0, top).astype(dtype))
        if chroma_format == "mono":
            return cls(out[0], None, None, "mono", bit_depth)
        if len(out) != 3:
            raise ParameterError(f"a {chroma_format} picture needs 3 planes, got {len(out)}")
        return cls(out[0], out[1], out[2], chroma_format, bit_depth)

    @classmethod
    def blank(cls, width: int, height: int, *, chroma_format: str = "420", bit_depth: int = 8) -> Picture:
        """A mid-grey picture."""
        dtype = _sample_dtype(bit_depth)
        mid = 1 << (bit_depth - 1)
        y = np.full((height, width), mid, dtype)
        cs = chroma_shape(height, width, chroma_format)
        if cs is None:
            return cls(y, None, None, "mono", bit_depth)
        return cls(y, np.full(cs, mid, dtype), np.full(cs, mid, dtype), chroma_format, bit_depth)


@dataclass
class ClipInfo:
    """Metadata of a clip: geometry, sample format and timing.

    Frame rate and interlacing travel here, not in `Picture`.
    """

    width: int
    height: int
    chroma_format: str = "420"
    bit_depth: int = 8
    frame_count: int = 0
    frame_rate: Fraction = Fraction(25, 1)
    interlacing: str = "p"  # YUV4MPEG2 'I' tag value: p, t, b or m
    pixel_aspect: Fraction | None = None
    container: str = "y4m"
    chroma_siting: str | None = None  # e.g. '420jpeg', '420mpeg2', '420paldv' for Y4M
    extra: dict[str, str] = field(default_factory=dict)  # X tags and the like

    @property
    def frame_bytes(self) -> int:
        """Bytes of one frame's samples in planar layout."""
        bps = 1 if self.bit_depth <= 8 else 2
        n = self.width * self.height
        cs = chroma_shape(self.height, self.width, self.chroma_format)
        if cs is not None:
            n += 2 * cs[0] * cs[1]
        return n * bps
