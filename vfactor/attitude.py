"""Attitude: the rotation from the body frame to the inertial frame at every step.

Modes of the ``[attitude]`` table:

``nadir``
    ``nadir_axis`` (default "+z") points at the planet centre, ``velocity_axis`` (default
    "+x") as close to the velocity as it can (exactly along it on a circular orbit; the
    orbit-local frame of ARCHITECTURE §3), then an optional ``yaw_deg`` turns the body about
    the nadir direction (right-handed about nadir).
``sun``
    ``sun_axis`` (default "+z") points at the Sun; ``secondary_axis`` (default "+x") is kept
    as close as it can to ``secondary_direction``: ``"orbit_normal"`` (default, along the
    angular momentum r x v), ``"north"`` (the ICRF pole) or an inertial vector ``[x, y, z]``.
``inertial``
    Body axes fixed in the inertial frame (ICRF axes), given either by
    ``quaternion = [w, x, y, z]`` (scalar first, rotating body vectors into inertial ones:
    v_i = q v_b q*) or by two axis directions: ``primary_axis`` + ``primary_direction`` and
    ``secondary_axis`` + ``secondary_direction`` (inertial vectors; the secondary is made
    orthogonal to the primary).
``spin``
    ``spin_axis`` (default "+z") along ``spin_direction``: ``"sun"``, ``"orbit_normal"``,
    ``"north"`` or an inertial vector; the body turns about it right-handedly at
    ``rate_rpm`` or ``rate_deg_s``. ``phase_axis`` (a body axis normal to the spin axis;
    default the next axis in x -> y -> z order) lies ``phase_deg`` + rate * t from the
    reference direction, which is the ICRF pole projected normal to the spin direction
    (the ICRF +x axis when the spin direction is within 1e-6 rad of the pole).

Axes are written "+x", "-y", "z" (same as "+z"), or as a body vector [x, y, z].

Two-vector alignment ("TRIAD"): the primary body axis goes exactly to the primary
direction, the secondary body axis to the direction in the plane of the primary and
secondary directions, on the secondary's side (Shuster & Oh, 1981, J. Guidance and
Control 4(1), 70-77, the TRIAD algorithm; Wertz (ed.), Spacecraft Attitude Determination
and Control, Reidel, 1978, §12.2).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from vfactor.orbit import MAX_ANGLE_DEG
from vfactor.tomlread import TableReader, show

__all__ = ["Attitude", "attitude_from_table", "axis_vector", "DEFAULT_ATTITUDE_NOTE",
           "MAX_SPIN_RPM", "SPIN_SAMPLES_PER_TURN"]

MODES = ("nadir", "sun", "inertial", "spin")

MAX_SPIN_RPM = 1000.0
"""Largest spin rate [rpm] a ``spin`` attitude may give: well above any spin-stabilised
vehicle (a few to about 100 rpm, common practice); larger values are slips (deg/s or rad/s
given as rpm)."""

PLAUSIBLE_SPIN_RPM = 120.0
"""Spin rate [rpm] above which ``check`` warns (common practice: spin-stabilised vehicles
turn at a few to some tens of rpm)."""

SPIN_SAMPLES_PER_TURN = 8
"""Time steps per spin turn below which ``check`` warns that the sampled attitude aliases:
a sampled rotation is only seen correctly with more than two samples per turn (the
Nyquist-Shannon sampling theorem), and about eight per turn are needed to follow the flux
on a face through a turn (our own margin, common practice in sampling)."""

DEFAULT_ATTITUDE_NOTE = ("no [attitude] table: nadir pointing assumed, body +z toward "
                         "nadir, +x along the velocity")

_AXES = {"x": (1.0, 0.0, 0.0), "y": (0.0, 1.0, 0.0), "z": (0.0, 0.0, 1.0)}
_PARALLEL_LIMIT = 1e-6  # rad: closer than this, two directions define no plane


def axis_vector(value) -> np.ndarray:
    """Unit body vector of an axis string ("+x", "-y", "z") or a 3-list.

    Raises
    ------
    ValueError
        When the value is neither.
    """
    if isinstance(value, str):
        text = value.strip().lower()
        sign = 1.0
        if text[:1] and text[:1] in "+-":
            sign = -1.0 if text[0] == "-" else 1.0
            text = text[1:]
        if text not in _AXES:
            raise ValueError(f"axis must be '+x', '-x', '+y', '-y', '+z', '-z' or [x, y, z], "
                             f"got {show(value)}")
        return sign * np.array(_AXES[text])
    if (isinstance(value, (list, tuple, np.ndarray)) and len(value) == 3
            and all(not isinstance(v, bool) and isinstance(v, (int, float, np.floating))
                    for v in value)):
        vector = np.asarray(value, dtype=np.float64)
        if not (np.all(np.isfinite(vector)) and np.max(np.abs(vector)) <= 1e6):
            raise ValueError(f"axis vector must hold finite numbers of magnitude <= 1e6, "
                             f"got {show(value)}")
        norm = float(np.linalg.norm(vector))
        if not norm > 0.0:
            raise ValueError(f"axis vector must be finite and non-zero, got {show(value)}")
        return vector / norm
    raise ValueError(f"axis must be '+x', '-x', '+y', '-y', '+z', '-z' or [x, y, z], "
                     f"got {show(value)}")


def _unit_rows(v):
    return v / np.linalg.norm(v, axis=1)[:, None]


def _triad(body_primary, body_secondary, primary, secondary):
    """(t,3,3) rotation R with R b1 = d1 and R b2 in the (d1, d2) half-plane of d2.

    ``primary`` and ``secondary`` are (t,3) inertial directions; the body axes (3,).
    """
    e1 = body_primary / np.linalg.norm(body_primary)
    e2 = body_secondary - np.dot(body_secondary, e1) * e1
    e2 = e2 / np.linalg.norm(e2)
    e3 = np.cross(e1, e2)
    body = np.stack([e1, e2, e3], axis=1)  # columns
    f1 = _unit_rows(primary)
    f2 = secondary - np.einsum("ij,ij->i", secondary, f1)[:, None] * f1
    f2 = _unit_rows(f2)
    f3 = np.cross(f1, f2)
    inertial = np.stack([f1, f2, f3], axis=2)  # (t,3,3) columns
    return np.ascontiguousarray(np.einsum("tij,kj->tik", inertial, body))


def _rotate_about(vectors, axes, angles):
    """Rodrigues rotation of (t,3) vectors about (t,3) unit axes by (t,) angles."""
    c, s = np.cos(angles)[:, None], np.sin(angles)[:, None]
    dot = np.einsum("ij,ij->i", axes, vectors)[:, None]
    return vectors * c + np.cross(axes, vectors) * s + axes * dot * (1.0 - c)


def _fallback_secondary(primary, secondary):
    """Replace secondary directions (nearly) parallel to the primary by ICRF +z, then +x."""
    p = _unit_rows(primary)
    s = _unit_rows(secondary)
    out = s.copy()
    for fallback in (np.array([0.0, 0.0, 1.0]), np.array([1.0, 0.0, 0.0])):
        bad = np.linalg.norm(np.cross(p, out), axis=1) < _PARALLEL_LIMIT
        if not np.any(bad):
            break
        out[bad] = fallback
    return out


@dataclass(frozen=True, eq=False)  # holds arrays: compared by identity
class Attitude:
    """A pointing law, evaluated per step by :meth:`body_to_inertial`.

    Attributes
    ----------
    mode : str — "nadir", "sun", "inertial" or "spin"
    primary_axis : (3,) float — body axis aligned exactly: nadir, sun or spin axis, or the
        inertial mode's primary axis (identity x for a quaternion) [1]
    secondary_axis : (3,) float — body axis kept toward the secondary direction
        (velocity, secondary target, phase axis) [1]
    yaw : float — nadir mode: turn about nadir [rad]
    secondary_direction : str or (3,) float — sun mode target of the secondary axis;
        inertial mode secondary direction; spin mode unused
    primary_direction : str or (3,) float — inertial mode primary direction; spin mode
        spin direction ("sun", "orbit_normal", "north" or a vector)
    rotation : (3,3) float or None — inertial mode: body-to-inertial matrix
    spin_rate : float — spin mode rate [rad s-1]
    phase : float — spin mode phase at time zero [rad]
    note : str — one line describing the law (and whether it was a default)
    """

    mode: str
    primary_axis: np.ndarray
    secondary_axis: np.ndarray
    yaw: float = 0.0
    secondary_direction: object = "orbit_normal"
    primary_direction: object = None
    rotation: np.ndarray | None = None
    spin_rate: float = 0.0
    phase: float = 0.0
    note: str = ""

    def _direction(self, spec, position, velocity, sun_dir):
        n = position.shape[0]
        if isinstance(spec, str):
            if spec == "sun":
                return _unit_rows(sun_dir)
            if spec == "orbit_normal":
                return _unit_rows(np.cross(position, velocity))
            if spec == "north":
                return np.tile([0.0, 0.0, 1.0], (n, 1))
            raise ValueError(f"unknown direction {spec!r}")
        return np.tile(np.asarray(spec, dtype=np.float64) / np.linalg.norm(spec), (n, 1))

    def body_to_inertial(self, position, velocity, sun_dir, time) -> np.ndarray:
        """Rotation from the body frame to the inertial frame at each step.

        Parameters
        ----------
        position : (t, 3) float — vehicle position from the planet centre, inertial [m]
        velocity : (t, 3) float — vehicle velocity, inertial [m s-1]
        sun_dir : (t, 3) float — unit vector from the vehicle toward the Sun [1]
        time : (t,) float — time since the epoch [s] (spin phase)

        Returns
        -------
        (t, 3, 3) float
            R with columns = body x, y, z axes in inertial; v_inertial = R @ v_body.
            Orthonormal and right-handed (det = +1).
        """
        position = np.atleast_2d(np.asarray(position, dtype=np.float64))
        velocity = np.atleast_2d(np.asarray(velocity, dtype=np.float64))
        sun_dir = np.atleast_2d(np.asarray(sun_dir, dtype=np.float64))
        time = np.atleast_1d(np.asarray(time, dtype=np.float64))
        n = position.shape[0]
        for name, arr in (("velocity", velocity), ("sun_dir", sun_dir)):
            if arr.shape != position.shape:
                raise ValueError(f"{name} must have the shape of position {position.shape}, "
                                 f"got {arr.shape}")
        if time.shape != (n,):
            raise ValueError(f"time must have shape ({n},), got {time.shape}")
        if self.mode == "nadir":
            nadir = -_unit_rows(position)
            along = velocity
            if self.yaw != 0.0:
                along = velocity - np.einsum("ij,ij->i", velocity, nadir)[:, None] * nadir
                along = _rotate_about(_unit_rows(along), nadir, np.full(n, self.yaw))
            return _triad(self.primary_axis, self.secondary_axis, nadir, along)
        if self.mode == "sun":
            primary = _unit_rows(sun_dir)
            secondary = self._direction(self.secondary_direction, position, velocity, sun_dir)
            secondary = _fallback_secondary(primary, secondary)
            return _triad(self.primary_axis, self.secondary_axis, primary, secondary)
        if self.mode == "inertial":
            return np.ascontiguousarray(np.broadcast_to(self.rotation, (n, 3, 3)).copy())
        if self.mode == "spin":
            spin = self._direction(self.primary_direction, position, velocity, sun_dir)
            reference = _fallback_secondary(spin, np.tile([0.0, 0.0, 1.0], (n, 1)))
            reference = reference - np.einsum("ij,ij->i", reference, spin)[:, None] * spin
            reference = _unit_rows(reference)
            phase_dir = _rotate_about(reference, spin, self.phase + self.spin_rate * time)
            return _triad(self.primary_axis, self.secondary_axis, spin, phase_dir)
        raise ValueError(f"unknown attitude mode {self.mode!r}")


def _axis(reader, key, default):
    value = reader.table.get(key, default)
    try:
        return axis_vector(value)
    except ValueError as exc:
        raise reader.error(key, str(exc)) from None


def _check_not_parallel(reader, key, first, second):
    if np.linalg.norm(np.cross(first, second)) < _PARALLEL_LIMIT:
        raise reader.error(key, f"must not be parallel to the primary axis, got "
                           f"{reader.table.get(key)!r}")


def _direction_value(reader, key, default, names):
    value = reader.table.get(key, default)
    if isinstance(value, str):
        if value not in names:
            raise reader.error(key, f"must be one of {', '.join(repr(v) for v in names)} or "
                               f"an inertial vector [x, y, z], got {value!r}")
        return value
    vector = reader.vector(key)
    return vector / np.linalg.norm(vector)


def _quaternion_matrix(reader, key):
    q = reader.vector(key, length=4)
    norm = float(np.linalg.norm(q))
    if abs(norm - 1.0) > 1e-6:
        raise reader.error(key, f"must be a unit quaternion [w, x, y, z] (norm "
                           f"{norm:.9g}), got {reader.table[key]!r}")
    w, x, y, z = q / norm
    return np.array([
        [1 - 2 * (y * y + z * z), 2 * (x * y - w * z), 2 * (x * z + w * y)],
        [2 * (x * y + w * z), 1 - 2 * (x * x + z * z), 2 * (y * z - w * x)],
        [2 * (x * z - w * y), 2 * (y * z + w * x), 1 - 2 * (x * x + y * y)],
    ])


_KEYS = {
    "nadir": {"mode", "nadir_axis", "velocity_axis", "yaw_deg"},
    "sun": {"mode", "sun_axis", "secondary_axis", "secondary_direction"},
    "inertial": {"mode", "quaternion", "primary_axis", "primary_direction",
                 "secondary_axis", "secondary_direction"},
    "spin": {"mode", "spin_axis", "spin_direction", "rate_rpm", "rate_deg_s", "phase_deg",
             "phase_axis"},
}


def _angle(reader, key: str) -> float:
    """An angle in degrees (default 0): finite, |x| <= MAX_ANGLE_DEG, a turn at most
    without a warning."""
    return reader.quantity(key, 0.0, "deg", -MAX_ANGLE_DEG, MAX_ANGLE_DEG,
                           plausible=(-360.0, 360.0),
                           advice_low="more than a full turn; write it within -360 .. 360",
                           advice_high="more than a full turn; write it within -360 .. 360")


def _spin_rate(reader, key: str, per_rpm: float) -> float:
    """A spin rate in the key's unit (``per_rpm`` units per rpm): not zero, at most
    :data:`MAX_SPIN_RPM` either way, warned above :data:`PLAUSIBLE_SPIN_RPM`."""
    unit = "rpm" if per_rpm == 1.0 else "deg/s"
    limit = MAX_SPIN_RPM * per_rpm
    rate = reader.number(key, minimum=-limit, maximum=limit, unit=unit,
                         why=f"{MAX_SPIN_RPM:g} rpm, far above any spin-stabilised vehicle",
                         plausible=(-PLAUSIBLE_SPIN_RPM * per_rpm, PLAUSIBLE_SPIN_RPM * per_rpm),
                         advice_low="a spin this fast is unusual; check the unit of the key",
                         advice_high="a spin this fast is unusual; check the unit of the key")
    if rate == 0.0:
        raise reader.error(key, f"is 0: a spin mode with no spin; for a body fixed in "
                           f"inertial space use mode = \"inertial\", else give the rate "
                           f"(got {show(reader.table[key])})")
    return rate


def _next_axis(spin_axis):
    k = int(np.argmax(np.abs(spin_axis)))
    return np.array(_AXES["xyz"[(k + 1) % 3]])


def attitude_from_table(table: dict | None, file: str | None = None,
                        problems: list | None = None) -> Attitude:
    """Build an :class:`Attitude` from the ``[attitude]`` table of a model file.

    Parameters
    ----------
    table : dict or None
        The parsed ``[attitude]`` table (keys in the module docstring). None gives the
        default, nadir pointing with +z to nadir and +x along the velocity; its ``note``
        says so.
    file : str, optional
        Model file named in error messages.
    problems : list, optional
        Receives warnings (:class:`vfactor.errors.Problem`) about legal but implausible
        values (a spin faster than :data:`PLAUSIBLE_SPIN_RPM`, an angle of more than a
        turn).

    Returns
    -------
    Attitude

    Raises
    ------
    vfactor.errors.ModelError
        Unknown mode or key, bad axis, parallel axes, bad rate; the message names the
        file, ``[attitude] key`` and the bad value.
    """
    if table is None:
        return Attitude(mode="nadir", primary_axis=np.array([0.0, 0.0, 1.0]),
                        secondary_axis=np.array([1.0, 0.0, 0.0]), note=DEFAULT_ATTITUDE_NOTE)
    reader = TableReader(table, file, "[attitude]", problems)
    mode = reader.string("mode", "nadir", choices=MODES)
    reader.check_keys(_KEYS[mode], f"for mode = {mode!r}")
    if mode == "nadir":
        primary = _axis(reader, "nadir_axis", "+z")
        secondary = _axis(reader, "velocity_axis", "+x")
        _check_not_parallel(reader, "velocity_axis", primary, secondary)
        yaw_deg = _angle(reader, "yaw_deg")
        return Attitude(mode=mode, primary_axis=primary, secondary_axis=secondary,
                        yaw=math.radians(yaw_deg),
                        note=f"nadir pointing: {reader.table.get('nadir_axis', '+z')} to nadir, "
                             f"{reader.table.get('velocity_axis', '+x')} along the velocity, "
                             f"yaw {yaw_deg:g} deg")
    if mode == "sun":
        primary = _axis(reader, "sun_axis", "+z")
        secondary = _axis(reader, "secondary_axis", "+x")
        _check_not_parallel(reader, "secondary_axis", primary, secondary)
        target = _direction_value(reader, "secondary_direction", "orbit_normal",
                                  ("orbit_normal", "north"))
        return Attitude(mode=mode, primary_axis=primary, secondary_axis=secondary,
                        secondary_direction=target,
                        note=f"sun pointing: {reader.table.get('sun_axis', '+z')} to the Sun, "
                             f"{reader.table.get('secondary_axis', '+x')} toward "
                             f"{reader.table.get('secondary_direction', 'orbit_normal')}")
    if mode == "inertial":
        if reader.has("quaternion"):
            for key in ("primary_axis", "primary_direction", "secondary_axis",
                        "secondary_direction"):
                if reader.has(key):
                    raise reader.error(key, f"give quaternion or axis directions, not both "
                                       f"(got {key} = {reader.table[key]!r})")
            rotation = _quaternion_matrix(reader, "quaternion")
            note = f"inertial: quaternion {list(reader.table['quaternion'])}"
        else:
            primary = _axis(reader, "primary_axis", "+z")
            secondary = _axis(reader, "secondary_axis", "+x")
            _check_not_parallel(reader, "secondary_axis", primary, secondary)
            d1 = reader.vector("primary_direction")
            d2 = reader.vector("secondary_direction")
            if np.linalg.norm(np.cross(d1 / np.linalg.norm(d1), d2 / np.linalg.norm(d2))) < _PARALLEL_LIMIT:
                raise reader.error("secondary_direction", f"must not be parallel to "
                                   f"primary_direction, got {reader.table['secondary_direction']!r}")
            rotation = _triad(primary, secondary, d1[None, :], d2[None, :])[0]
            note = (f"inertial: {reader.table.get('primary_axis', '+z')} along "
                    f"{list(reader.table['primary_direction'])}")
        return Attitude(mode=mode, primary_axis=np.array([1.0, 0.0, 0.0]),
                        secondary_axis=np.array([0.0, 1.0, 0.0]), rotation=rotation, note=note)
    # spin
    primary = _axis(reader, "spin_axis", "+z")
    if reader.has("phase_axis"):
        secondary = _axis(reader, "phase_axis", None)
        if abs(float(np.dot(primary, secondary))) > 1e-9:
            raise reader.error("phase_axis", f"must be normal to the spin axis, got "
                               f"{reader.table['phase_axis']!r}")
    else:
        secondary = _next_axis(primary)
    direction = _direction_value(reader, "spin_direction", "sun",
                                 ("sun", "orbit_normal", "north"))
    if reader.has("rate_rpm") and reader.has("rate_deg_s"):
        raise reader.error("rate_deg_s", f"give rate_rpm or rate_deg_s, not both (rate_deg_s "
                           f"= {reader.table['rate_deg_s']!r})")
    if reader.has("rate_rpm"):
        rate = _spin_rate(reader, "rate_rpm", 1.0) * 2.0 * math.pi / 60.0
    elif reader.has("rate_deg_s"):
        rate = math.radians(_spin_rate(reader, "rate_deg_s", 6.0))
    else:
        raise reader.error("rate_rpm", "spin mode needs rate_rpm or rate_deg_s")
    phase = math.radians(_angle(reader, "phase_deg"))
    return Attitude(mode=mode, primary_axis=primary, secondary_axis=secondary,
                    primary_direction=direction, spin_rate=rate, phase=phase,
                    note=f"spin: {reader.table.get('spin_axis', '+z')} toward "
                         f"{reader.table.get('spin_direction', 'sun')} at "
                         f"{rate * 60.0 / (2.0 * math.pi):g} rpm")
