"""Reference pictures as a decoder has them: a real H.264 encode and decode through PyAV.

The pictures are encoded with libx264 (ITU-T H.264) at a constant QP (``qp`` option), one thread
and the 'medium' preset so the result is reproducible bit for bit, then decoded back; the decoded
pictures replace the source pictures as references in `synth gop --decoded-refs QP`.
"""

from __future__ import annotations

from collections.abc import Sequence
from fractions import Fraction

import numpy as np

from synth.errors import ParameterError
from synth.picture import Picture

__all__ = ["encode_decode"]


def encode_decode(pictures: Sequence[Picture], *, qp: int, frame_rate: Fraction = Fraction(25)) -> list[Picture]:
    """Encode `pictures` with libx264 at constant `qp` and return the decoded pictures.

    Parameters
    ----------
    pictures : sequence of Picture
        8-bit 4:2:0 pictures of even size, display order.
    qp : int
        Quantisation parameter, 0..51 (ITU-T H.264 clause 7.4.2.2 range for 8-bit).
    frame_rate : Fraction
        Stored in the stream (does not change the pictures).

    Returns
    -------
    list of Picture
        One decoded picture per input picture, display order.

    Raises
    ------
    ParameterError
        For a QP outside 0..51, pictures that are not 8-bit 4:2:0 of even size, or a decoder
        returning a different number of pictures.
    """
    import av

    try:
        qp_i = int(qp)
    except (TypeError, ValueError):
        raise ParameterError(f"decoded-refs QP must be an integer 0..51, got {qp!r}") from None
    if qp_i != qp or not 0 <= qp_i <= 51:
        raise ParameterError(f"decoded-refs QP must be an integer 0..51, got {qp!r}")
    if not pictures:
        return []
    first = pictures[0]
    if first.chroma_format != "420" or first.bit_depth != 8 or first.width % 2 or first.height % 2:
        raise ParameterError(
            f"decoded references need 8-bit 4:2:0 pictures of even size, got {first.width}x{first.height} "
            f"{first.chroma_format} {first.bit_depth}-bit"
        )
    codec = av.CodecContext.create("libx264", "w")
    codec.width, codec.height = first.width, first.height
    codec.pix_fmt = "yuv420p"
    rate = Fraction(frame_rate) if frame_rate else Fraction(25)
    codec.time_base = 1 / rate
    codec.framerate = rate
    codec.options = {"qp": str(qp_i), "preset": "medium", "threads": "1"}
    codec.thread_count = 1
    packets = []
    for i, pic in enumerate(pictures):
        if not pic.same_format(first):
            raise ParameterError("all pictures must share one format for the encode")
        frame = av.VideoFrame(first.width, first.height, "yuv420p")
        for plane, data in zip(frame.planes, pic.planes):
            stride = plane.line_size
            buf = np.zeros((data.shape[0], stride), np.uint8)
            buf[:, : data.shape[1]] = data
            plane.update(buf.tobytes())
        frame.pts = i
        packets.extend(codec.encode(frame))
    packets.extend(codec.encode(None))
    decoder = av.CodecContext.create("h264", "r")
    decoder.thread_count = 1
    decoded = []
    for pkt in packets:
        decoded.extend(decoder.decode(pkt))
    decoded.extend(decoder.decode(None))
    if len(decoded) != len(pictures):
        raise ParameterError(f"decoder returned {len(decoded)} pictures for {len(pictures)} encoded")
    decoded.sort(key=lambda f: f.pts if f.pts is not None else 0)
    out = []
    for frame in decoded:
        planes = []
        for plane, ref in zip(frame.planes, first.planes):
            h, w = ref.shape
            arr = np.frombuffer(bytes(plane), np.uint8).reshape(-1, plane.line_size)[:h, :w]
            planes.append(np.ascontiguousarray(arr))
        out.append(Picture(planes[0], planes[1], planes[2], "420", 8))
    return out
