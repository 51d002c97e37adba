"""Makers: every way to make the picture at time t from its two references, behind one protocol
(`Maker`: prepare once per reference pair, then `PreparedPair.at(t)`) and one registry, `MAKERS`.

============ ============== ===================================================================
name         needs vectors  scheme
============ ============== ===================================================================
lmmse        yes            the core estimator (LMMSE combination of projected vector candidates)
projection   yes            nearest landed vector per pixel
weighted     yes            distance-weighted average of the estimator's K candidates
obmc         yes            overlapped block motion compensation, raised-cosine window
average      no             (1 - t) past + t future
dis-fast     no             optical-flow interpolation, OpenCV DIS 'fast'
dis-medium   no             optical-flow interpolation, OpenCV DIS 'medium'
farneback    no             optical-flow interpolation, OpenCV Farneback
============ ============== ===================================================================

Every command that makes a picture takes these names (``--maker NAME`` or ``--makers A,B``).
Modules are imported when a maker is first used, so listing the registry is cheap.
"""

from __future__ import annotations

import importlib

from synth.errors import ParameterError
from synth.makers.base import Maker, Prediction, PreparedPair, check_pair, temporal_blend

__all__ = [
    "Maker",
    "Prediction",
    "PreparedPair",
    "MAKERS",
    "DEFAULT_MAKER",
    "BASELINE_MAKER",
    "get_maker",
    "maker_names",
    "resolve_makers",
    "check_pair",
    "temporal_blend",
]

#: The product, used where one maker is asked for and none is named.
DEFAULT_MAKER = "lmmse"
#: The optical-flow peer every comparison is measured against.
BASELINE_MAKER = "dis-medium"

# name -> (needs vectors, summary, picture function "module:attr", prepare function or None)
_TABLE = {
    "lmmse": (True, "LMMSE estimator over projected vector candidates", "vector_based:lmmse_picture", None),
    "projection": (True, "nearest projected vector per pixel", "vector_based:projection_picture", None),
    "weighted": (True, "distance-weighted average of the K candidates", "vector_based:weighted_picture", None),
    "obmc": (True, "overlapped block MC of projected vectors (raised cosine)", "obmc:obmc_picture", None),
    "average": (False, "temporal-distance average of the references", "average:average_picture", None),
    "dis-fast": (
        False,
        "optical-flow interpolation, DIS fast preset",
        "optical_flow:interpolate_prepared",
        "optical_flow:prepare_dis_fast",
    ),
    "dis-medium": (
        False,
        "optical-flow interpolation, DIS medium preset",
        "optical_flow:interpolate_prepared",
        "optical_flow:prepare_dis_medium",
    ),
    "farneback": (
        False,
        "optical-flow interpolation, Farneback flow",
        "optical_flow:interpolate_prepared",
        "optical_flow:prepare_farneback",
    ),
}

#: Registered names, in report order: vector-based first, then those that need no vectors.
MAKERS: tuple[str, ...] = tuple(_TABLE)

_CACHE: dict[str, Maker] = {}


def _load(ref: str):
    module, attr = ref.split(":")
    return getattr(importlib.import_module(f"synth.makers.{module}"), attr)


def maker_names(*, vectors: bool = True) -> list[str]:
    """Registered names (only those needing no vectors when `vectors` is False)."""
    return [n for n, row in _TABLE.items() if vectors or not row[0]]


def get_maker(name: str, *, option: str = "--maker") -> Maker:
    """The registered maker called `name`.

    Raises
    ------
    ParameterError
        For an unknown name; the message names `option` and lists the known names.
    """
    if name not in _TABLE:
        raise ParameterError(f"{option} must be one of {', '.join(MAKERS)}, got {name!r}")
    if name not in _CACHE:
        needs, summary, picture, prepare = _TABLE[name]
        extra = {"prepare_function": _load(prepare)} if prepare else {}
        _CACHE[name] = Maker(name, _load(picture), needs, summary, **extra)
    return _CACHE[name]


def resolve_makers(names=None, *, vectors: bool = True, option: str = "--makers") -> list[Maker]:
    """Makers for a run: the given names (a list, or one comma-separated string), or every
    registered maker when `names` is None (those needing no vectors only, when `vectors` is False).

    Raises
    ------
    ParameterError
        For an unknown or repeated name, or an empty list (the message names `option`).
    """
    if names is None:
        return [get_maker(n) for n in maker_names(vectors=vectors)]
    if isinstance(names, str):
        names = [n.strip() for n in names.split(",") if n.strip()]
    names = list(names)
    if not names:
        raise ParameterError(f"{option} must name at least one maker")
    if len(set(names)) != len(names):
        raise ParameterError(f"{option} must not repeat a name, got {','.join(names)}")
    return [get_maker(n, option=option) for n in names]
