"""Named frames on a limb segment where a cuff can be strapped."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Literal

from .checks import in_range, vector
from .errors import ParameterError
from .urdf import Joint, Link

__all__ = ["Segment", "SiteSpec", "SEGMENTS", "DEFAULT_SITES", "check_sites", "site_frames"]

Segment = Literal["upper_arm", "forearm", "hand"]
SEGMENTS: tuple[str, ...] = ("upper_arm", "forearm", "hand")


@dataclass(frozen=True)
class SiteSpec:
    """A cuff site: a frame on a segment's long axis, plus an optional offset.

    Parameters
    ----------
    name : str
        Site name, e.g. ``"upper_arm"``; the frame is called
        ``<prefix>_cuff_<name>`` in the URDF.
    segment : {"upper_arm", "forearm", "hand"}
        Segment that carries the site.  The forearm site rides distal of the
        pronation/supination joint, so it turns with the forearm.
    fraction : float
        Distance from the proximal joint centre along the segment, as a
        fraction of the segment length, in [0, 1].  For ``hand`` on the
        exoskeleton the length is the wrist-to-grip distance; on the human,
        the wrist-to-third-metacarpale length.
    offset_m : (3,) tuple
        Extra offset in the segment frame [m] (frame axes: x forward, y left,
        z up with the arm hanging).
    """

    name: str
    segment: Segment
    fraction: float
    offset_m: tuple[float, float, float] = (0.0, 0.0, 0.0)

    def __post_init__(self) -> None:
        owner = f"SiteSpec({self.name!r})"
        if not self.name or not self.name.replace("_", "").isalnum():
            raise ParameterError(f"{owner}.name must be a non-empty identifier, got {self.name!r}")
        if self.segment not in SEGMENTS:
            raise ParameterError(f"{owner}.segment must be one of {SEGMENTS}, got {self.segment!r}")
        object.__setattr__(self, "fraction", in_range(owner, "fraction", self.fraction, 0.0, 1.0))
        object.__setattr__(self, "offset_m", vector(owner, "offset_m", self.offset_m, 3))

    def frame(self, prefix: str) -> str:
        """URDF link name of the site on a model whose names start with ``prefix``."""
        return f"{prefix}_cuff_{self.name}"


#: Default layout on the exoskeleton: mid upper arm, 60 % down the forearm,
#: and the hand grip at the end of the hand segment (common practice).
DEFAULT_SITES: tuple[SiteSpec, ...] = (
    SiteSpec("upper_arm", "upper_arm", 0.5),
    SiteSpec("forearm", "forearm", 0.6),
    SiteSpec("hand", "hand", 1.0),
)


def check_sites(owner: str, sites) -> tuple[SiteSpec, ...]:
    """Return ``sites`` as a tuple of :class:`SiteSpec` with unique names, or raise naming ``owner.sites``."""
    try:
        out = tuple(sites)
    except TypeError as e:
        raise ParameterError(f"{owner}.sites must be a sequence of SiteSpec, got {sites!r}") from e
    for s in out:
        if not isinstance(s, SiteSpec):
            raise ParameterError(f"{owner}.sites must hold SiteSpec records, got {s!r}")
    names = [s.name for s in out]
    if len(set(names)) != len(names):
        raise ParameterError(f"{owner}.sites has duplicate names {names}")
    return out


def site_frames(
    prefix: str,
    sites: Sequence[SiteSpec],
    segment_link: Mapping[str, str],
    length_m: Mapping[str, float],
) -> tuple[list[Link], list[Joint]]:
    """Massless site links and the fixed joints that mount them on their segments.

    A site sits at ``(0, 0, -fraction * length) + offset_m`` in its segment's
    link frame (segments point along -z).
    """
    links, joints = [], []
    for s in sites:
        frame = s.frame(prefix)
        pos = (s.offset_m[0], s.offset_m[1], s.offset_m[2] - s.fraction * length_m[s.segment])
        links.append(Link(frame))
        joints.append(Joint(f"{frame}_mount", "fixed", segment_link[s.segment], frame, pos))
    return links, joints
