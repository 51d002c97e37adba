"""The codec side: corrective offsets and their cost, encoders in the loop, RD measurement and
BD-rate, exports of synthetic references for an external encoder.
"""

from synth.lazy import lazy_exports

_EXPORTS = {
    "refine_with_offsets": "synth.codec.offsets",
    "bd_rate": "synth.codec.bdrate",
    "bd_psnr": "synth.codec.bdrate",
    "encode_pictures": "synth.codec.encode",
}
__all__ = sorted(_EXPORTS)
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
