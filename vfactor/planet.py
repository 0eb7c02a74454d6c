"""The central body: size, gravity and rotation, Earth by default.

A :class:`Planet` is a plain value passed to the orbit propagator (``gm``, ``j2``,
``radius``), to the shadow model (``radius``) and to the heating stage. Its environment
defaults (albedo, outgoing long-wave flux) are optional: when unset, the
``[environment]`` design case decides.
"""

from __future__ import annotations

from dataclasses import dataclass

from vfactor.constants import (
    EARTH_EQUATORIAL_RADIUS_M,
    EARTH_GM_M3_S2,
    EARTH_J2,
    EARTH_ROTATION_RATE_RAD_S,
)

__all__ = ["Planet", "EARTH", "planet_by_name"]


@dataclass(frozen=True)
class Planet:
    """A spherical central body with a J2 term.

    Attributes
    ----------
    name : str
        Name used in messages and output attributes.
    radius : float
        Equatorial radius [m]; also the radius of the sphere that casts the shadow.
    gm : float
        Gravitational parameter GM [m3 s-2].
    j2 : float
        Second zonal harmonic of the gravity field [1]; used for the secular drift of the
        node and perigee and for sun-synchronous inclinations.
    rotation_rate : float
        Sidereal rotation rate [rad s-1].
    albedo : float or None
        Default Bond albedo [1]; None lets the environment design case decide.
    planet_ir : float or None
        Default outgoing long-wave flux at the top of the atmosphere [W m-2]; None lets
        the environment design case decide.
    """

    name: str
    radius: float
    gm: float
    j2: float
    rotation_rate: float
    albedo: float | None = None
    planet_ir: float | None = None

    def __post_init__(self):
        for field_name in ("radius", "gm", "rotation_rate"):
            value = getattr(self, field_name)
            if not (isinstance(value, (int, float)) and value > 0.0):
                raise ValueError(f"Planet {self.name!r}: {field_name} must be a positive "
                                 f"number, got {value!r}")


EARTH = Planet(
    name="Earth",
    radius=EARTH_EQUATORIAL_RADIUS_M,
    gm=EARTH_GM_M3_S2,
    j2=EARTH_J2,
    rotation_rate=EARTH_ROTATION_RATE_RAD_S,
)
"""Earth with WGS 84 radius, GM and rotation rate and the EGM96 J2 (see vfactor.constants)."""


_KNOWN = {EARTH.name.lower(): EARTH}


def planet_by_name(name) -> Planet:
    """The built-in :class:`Planet` of that name (case-insensitive), or ``name`` itself if it
    already is a Planet. Used where a trajectory was read back from a results file, which
    stores the planet by name.

    Raises
    ------
    ValueError
        When the name is not a built-in planet.
    """
    if isinstance(name, Planet):
        return name
    key = str(name).strip().lower()
    if key not in _KNOWN:
        raise ValueError(f"unknown planet {name!r}; built in: "
                         f"{', '.join(p.name for p in _KNOWN.values())}")
    return _KNOWN[key]
