"""GNSS fixes to pitch metres (docs/wearables.md, "GNSS coordinates").

Wearable units report WGS 84 geodetic latitude and longitude in degrees (CDF
v0.3.2 player fields ``lat``/``long``). The match set-up carries a pitch
calibration under the CDF meta key ``venue.gnss_pitch``: the four corner
flags, or the two goal-line centres plus the pitch width.

Method
------
1. The geodesy is done by pymap3d (Hirsch 2018, "PyMap3D: Python 3-D
   coordinate conversions for terrestrial and geospace environments", JOSS
   3(23), 580): ``pymap3d.geodetic2enu`` turns a fix into metres east, north
   and up in the local east-north-up (ENU) tangent plane at the pitch centre,
   on the WGS 84 ellipsoid (NIMA TR8350.2, 2000), every point at height 0;
   ``pymap3d.enu2geodetic`` is the inverse. No geodesy is written here.
2. Here only plane geometry follows, in the ENU plane (up is dropped): a
   shift to the centre spot and a rotation onto the pitch axes. ``x`` is the
   unit vector from the x_min goal-line centre to the x_max goal-line centre
   (for corners: the midpoints of the two goal lines, i.e. the mean direction
   of the two touchlines); ``y`` is ``x`` turned 90° counter-clockwise seen
   from above (to the left of ``x``). The origin is the mean of the four
   corners (the midpoint of the two goal-line centres).

Accuracy: dropping "up" projects the ground orthographically onto the tangent
plane, which shortens radial distances by a relative ``1 - cos(r / R)`` at a
distance ``r`` from the centre (R ~ 6371 km): under 1e-10 within a pitch, far
below any GNSS error (from memory, spherical approximation). tests/test_gnss.py
checks projected distances against geographiclib's geodesics (Karney 2013,
"Algorithms for geodesics", J. Geodesy 87:43-55) to 1 cm.

Checks on arrival (corner form): the two touchlines within ``side_tolerance``
of each other, the two goal lines likewise, each corner angle within
``angle_tolerance_deg`` of 90°, and the right handedness (pacewire defaults,
docs/wearables.md "Checks on arrival": sides within 1%, right angles within 1°).
A failure raises :class:`CalibrationError` naming the corner most to blame: two neighbouring names exchanged (a crossed
quadrilateral) are named as such; otherwise, since a single misplaced flag
leaves the other three at a right angle, the corner whose opposite angle is
closest to 90° is named (ties go to the corner with the worse angle of its
own; a flag moved along a side, or a symmetric error, cannot be told apart
from its neighbour's).
"""
from __future__ import annotations

import math
from typing import Any

import numpy as np
import pymap3d
from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator
from pymap3d.ellipsoid import Ellipsoid

from pacewire.errors import PacewireError, describe_validation

WGS84 = Ellipsoid.from_name("wgs84")
KEY = "venue.gnss_pitch"
CORNERS = ("x_min_y_min", "x_max_y_min", "x_max_y_max", "x_min_y_max")  # counter-clockwise seen from above
CORNER_XY = ((-1, -1), (1, -1), (1, 1), (-1, 1))  # signs of (x, y) at each corner
MIN_SIDE_M = 1.0  # below this a side cannot give a direction (a repeated flag); no pitch is that small
VENUE_TOLERANCE = 0.01  # docs/wearables.md: meta pitch_length/pitch_width within 1% of the calibration


class CalibrationError(PacewireError, ValueError):
    """A pitch calibration that cannot be used; the message starts with the key at fault,
    e.g. ``venue.gnss_pitch.corners.x_max_y_max: angle 93.1° is not within 1° of a right angle``."""

    def __init__(self, message: str, key: str = KEY):
        super().__init__(message)
        self.key = key


# --- the calibration as it arrives in the CDF meta -----------------------------------

class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class GnssPoint(_Strict):
    """A WGS 84 geodetic position, degrees (CDF names: ``lat``, ``long``)."""

    lat: float = Field(ge=-90, le=90, allow_inf_nan=False, strict=True)
    long: float = Field(ge=-180, le=180, allow_inf_nan=False, strict=True)


class GnssCorners(_Strict):
    """The four corner flags, named by their pitch coordinates."""

    x_min_y_min: GnssPoint
    x_max_y_min: GnssPoint
    x_max_y_max: GnssPoint
    x_min_y_max: GnssPoint


class GnssGoalCentres(_Strict):
    """The centres of the two goal lines."""

    x_min: GnssPoint
    x_max: GnssPoint


class GnssPitch(_Strict):
    """``venue.gnss_pitch``: exactly one of ``corners`` or ``goal_centres`` + ``width_m`` (metres)."""

    corners: GnssCorners | None = None
    goal_centres: GnssGoalCentres | None = None
    width_m: float | None = Field(default=None, gt=0, allow_inf_nan=False, strict=True)

    @model_validator(mode="after")
    def _one_form(self) -> GnssPitch:
        if self.corners is not None and self.goal_centres is not None:
            raise ValueError("give either corners or goal_centres + width_m, not both")
        if self.corners is None and self.goal_centres is None:
            raise ValueError("needs corners, or goal_centres + width_m")
        if self.goal_centres is not None and self.width_m is None:
            raise ValueError("goal_centres needs width_m (the pitch width, m)")
        if self.corners is not None and self.width_m is not None:
            raise ValueError("width_m goes with goal_centres only; with corners the width comes from the corners")
        return self


def parse_calibration(data: Any) -> GnssPitch:
    """Validate a ``venue.gnss_pitch`` object; errors become one :class:`CalibrationError`
    listing each bad key as ``venue.gnss_pitch.corners.x_max_y_min.lat: ...``."""
    try:
        return GnssPitch.model_validate(data)
    except ValidationError as exc:
        first = ".".join([KEY, *(str(p) for p in exc.errors()[0]["loc"])])
        raise CalibrationError(describe_validation(exc, prefix=KEY, limit=None), first) from None


# --- the projection -------------------------------------------------------------------

def _wrap_lon(lon: float) -> float:
    return (lon + 180.0) % 360.0 - 180.0


def _mean_point(points: list[GnssPoint]) -> tuple[float, float]:
    """A first guess at the centre: mean lat/long (longitudes unwrapped across ±180°)."""
    lon0 = points[0].long
    lons = [lon0 + _wrap_lon(p.long - lon0) for p in points]
    return sum(p.lat for p in points) / len(points), _wrap_lon(sum(lons) / len(lons))


def _enu(points: list[GnssPoint], lat0: float, lon0: float) -> np.ndarray:
    """(N, 2) east/north metres of ``points`` in the ENU plane at (lat0, lon0), height 0."""
    lat = np.array([p.lat for p in points])
    lon = np.array([p.long for p in points])
    e, n, _ = pymap3d.geodetic2enu(lat, lon, 0.0, lat0, lon0, 0.0, ell=WGS84, deg=True)
    return np.column_stack([e, n])


def _centred(points: list[GnssPoint]) -> tuple[float, float, np.ndarray]:
    """The centre (lat, long) of ``points`` and their ENU coordinates there: the ENU plane is
    first put at the mean lat/long, then moved to the mean of the points in that plane."""
    lat0, lon0 = _mean_point(points)
    pts = _enu(points, lat0, lon0)
    e, n = pts.mean(axis=0)
    lat_c, lon_c, _ = pymap3d.enu2geodetic(e, n, 0.0, lat0, lon0, 0.0, ell=WGS84, deg=True)
    lat_c, lon_c = float(lat_c), _wrap_lon(float(lon_c))
    return lat_c, lon_c, _enu(points, lat_c, lon_c)


def _angle_deg(u: np.ndarray, v: np.ndarray) -> float:
    """Unsigned angle between two plane vectors, degrees."""
    return math.degrees(math.atan2(abs(u[0] * v[1] - u[1] * v[0]), float(u @ v)))


_SIDE_PAIRS = (("touchlines", (0, 1), (3, 2)), ("goal lines", (0, 3), (1, 2)))  # corner indices of opposite sides
# label, corners (a0, a1), length a, corners (b0, b1), length b, their difference as a share of the mean
SideFault = tuple[str, tuple[int, int], float, tuple[int, int], float, float]


def _faults(p: np.ndarray, side_tolerance: float) -> tuple[list[SideFault], list[float], bool]:
    """The corner form's measurements: (side faults [(label, (a0, a1), la, (b0, b1), lb, share)], the four
    corner angles in degrees, whether x_min_y_max lies on the +y side of x_min_y_min)."""
    sides: list[SideFault] = []
    for label, (a0, a1), (b0, b1) in _SIDE_PAIRS:
        la, lb = float(np.hypot(*(p[a1] - p[a0]))), float(np.hypot(*(p[b1] - p[b0])))
        share = abs(la - lb) / ((la + lb) / 2)
        if share > side_tolerance:
            sides.append((label, (a0, a1), la, (b0, b1), lb, share))
    angles = [_angle_deg(p[(k - 1) % 4] - p[k], p[(k + 1) % 4] - p[k]) for k in range(4)]
    x_axis = (p[1] + p[2]) / 2 - (p[0] + p[3]) / 2
    right_handed = bool((p[3] - p[0]) @ np.array([-x_axis[1], x_axis[0]]) > 0)
    return sides, angles, right_handed


def _check_corners(p: np.ndarray, side_tolerance: float, angle_tolerance_deg: float) -> None:
    """Raise CalibrationError for the corner form's faults; ``p`` is (4, 2) ENU in CORNERS order."""
    key = f"{KEY}.corners"
    for k in range(4):
        side = float(np.hypot(*(p[(k + 1) % 4] - p[k])))
        if side < MIN_SIDE_M:
            where = f"{key}.{CORNERS[(k + 1) % 4]}"
            raise CalibrationError(f"{where}: is {side:.2f} m from {CORNERS[k]}; the corners must be distinct "
                                   f"flags of the pitch", where)

    sides, angles, right_handed = _faults(p, side_tolerance)
    dev = [abs(a - 90.0) for a in angles]
    if sides or max(dev) > angle_tolerance_deg:
        # Two neighbouring names exchanged make a crossed quadrilateral: say so when exchanging
        # them back gives a right-handed rectangle within the tolerances.
        for k in range(4):
            q = p.copy()
            q[[k, (k + 1) % 4]] = q[[(k + 1) % 4, k]]
            s2, a2, rh2 = _faults(q, side_tolerance)
            if not s2 and max(abs(a - 90.0) for a in a2) <= angle_tolerance_deg and rh2:
                where = f"{key}.{CORNERS[k]}"
                raise CalibrationError(f"{where}: {CORNERS[k]} and {CORNERS[(k + 1) % 4]} look exchanged (with "
                                       f"their positions swapped the corners make a rectangle)", where)

    # A single misplaced flag keeps the angle opposite it square: blame the corner whose opposite
    # angle is closest to 90°, then the one whose own angle is furthest from it.
    blame = min(range(4), key=lambda k: (round(dev[(k + 2) % 4], 6), -round(dev[k], 6), k))
    where = f"{key}.{CORNERS[blame]}"
    hint = ""
    if dev[(blame + 2) % 4] <= angle_tolerance_deg:
        # where the other three put this corner: the fourth corner of their parallelogram
        expected = p[(blame - 1) % 4] + p[(blame + 1) % 4] - p[(blame + 2) % 4]
        hint = f"; the other three corners put it {float(np.hypot(*(p[blame] - expected))):.2f} m from where it is"

    if sides:
        label, (a0, a1), la, (b0, b1), lb, share = sides[0]
        raise CalibrationError(
            f"{where}: the {label} differ by {share:.1%} ({CORNERS[a0]}→{CORNERS[a1]} {la:.2f} m, "
            f"{CORNERS[b0]}→{CORNERS[b1]} {lb:.2f} m; at most {side_tolerance:.1%}){hint}", where)
    if max(dev) > angle_tolerance_deg:
        if dev[blame] > angle_tolerance_deg:
            raise CalibrationError(f"{where}: angle {angles[blame]:.1f}° is not within {angle_tolerance_deg:g}° "
                                   f"of a right angle{hint}", where)
        bad = ", ".join(f"{CORNERS[k]} {angles[k]:.1f}°" for k in range(4) if dev[k] > angle_tolerance_deg)
        raise CalibrationError(f"{where}: the angles at {bad} are not within {angle_tolerance_deg:g}° of a "
                               f"right angle{hint}", where)
    if not right_handed:
        where = f"{key}.x_min_y_max"
        raise CalibrationError(
            f"{where}: lies to the right of the x direction (x_min→x_max) seen from above, so the corners are "
            f"mirrored: y must point to the left of x (two names exchanged, e.g. y_min and y_max?)", where)


class PitchProjection:
    """WGS 84 degrees <-> pitch metres (x along the touchlines, y along the goal lines, origin
    at the centre spot) through the ENU tangent plane at the pitch centre.

    Build it with :meth:`from_calibration`. Attributes: ``length_m``, ``width_m`` (metres;
    for corners the mean of the opposite sides), ``centre`` (lat, long degrees),
    ``bearing_deg`` (compass bearing of +x, degrees clockwise from true north).
    """

    __slots__ = ("centre", "length_m", "width_m", "bearing_deg", "_origin", "_x", "_y")

    def __init__(self, centre: tuple[float, float], origin_en: np.ndarray, x_axis: np.ndarray,
                 length_m: float, width_m: float):
        self.centre = (float(centre[0]), float(centre[1]))
        self.length_m = float(length_m)
        self.width_m = float(width_m)
        self._origin = (float(origin_en[0]), float(origin_en[1]))  # the centre spot in the ENU plane, m
        ux, uy = (float(v) for v in x_axis / np.hypot(*x_axis))
        self._x = (ux, uy)  # +x as (east, north)
        self._y = (-uy, ux)  # +y: +x turned 90° counter-clockwise seen from above
        self.bearing_deg = math.degrees(math.atan2(ux, uy)) % 360.0

    def __repr__(self) -> str:
        return (f"PitchProjection(centre=({self.centre[0]:.7f}, {self.centre[1]:.7f}), "
                f"length_m={self.length_m:.2f}, width_m={self.width_m:.2f}, bearing_deg={self.bearing_deg:.2f})")

    @classmethod
    def from_calibration(cls, cal: GnssPitch, side_tolerance: float = 0.01,
                         angle_tolerance_deg: float = 1.0) -> PitchProjection:
        """The projection of a validated calibration; raises :class:`CalibrationError` when the
        corners are not a rectangle within the tolerances (relative side difference; degrees).
        A plain dict is validated first with :func:`parse_calibration`."""
        if not isinstance(cal, GnssPitch):
            cal = parse_calibration(cal)
        if cal.corners is not None:
            pts = [getattr(cal.corners, name) for name in CORNERS]
            lat_c, lon_c, p = _centred(pts)
            _check_corners(p, side_tolerance, angle_tolerance_deg)
            a, b, c, d = p
            x_axis = (b + c) / 2 - (a + d) / 2  # x_min goal-line centre -> x_max goal-line centre
            length = (np.hypot(*(b - a)) + np.hypot(*(c - d))) / 2
            width = (np.hypot(*(d - a)) + np.hypot(*(c - b))) / 2
            return cls((lat_c, lon_c), p.mean(axis=0), x_axis, length, width)
        g = cal.goal_centres
        assert g is not None and cal.width_m is not None  # GnssPitch guarantees one form
        lat_c, lon_c, p = _centred([g.x_min, g.x_max])
        x_axis = p[1] - p[0]
        length = float(np.hypot(*x_axis))
        if length < MIN_SIDE_M:
            raise CalibrationError(
                f"{KEY}.goal_centres.x_max: is {length:.2f} m from x_min; the goal-line centres must be the two "
                f"ends of the pitch", f"{KEY}.goal_centres.x_max")
        return cls((lat_c, lon_c), p.mean(axis=0), x_axis, length, cal.width_m)

    def to_pitch(self, lat: np.ndarray, lon: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Pitch (x, y) metres of WGS 84 fixes (degrees, height 0); arrays of any shape."""
        e, n, _ = pymap3d.geodetic2enu(np.asarray(lat, float), np.asarray(lon, float), 0.0,
                                       self.centre[0], self.centre[1], 0.0, ell=WGS84, deg=True)
        e = e - self._origin[0]
        n = n - self._origin[1]
        return e * self._x[0] + n * self._x[1], e * self._y[0] + n * self._y[1]

    def to_gnss(self, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """WGS 84 (lat, long) degrees of pitch points (metres), placed in the ENU plane at
        height 0 (under 1e-6 m from the ground point within a pitch); inverse of :meth:`to_pitch`."""
        x = np.asarray(x, float)
        y = np.asarray(y, float)
        e = self._origin[0] + x * self._x[0] + y * self._y[0]
        n = self._origin[1] + x * self._x[1] + y * self._y[1]
        lat, lon, _ = pymap3d.enu2geodetic(e, n, 0.0, self.centre[0], self.centre[1], 0.0, ell=WGS84, deg=True)
        return lat, (np.asarray(lon) + 180.0) % 360.0 - 180.0


def rectangle(centre_lat: float, centre_lon: float, length_m: float, width_m: float,
              bearing_deg: float) -> GnssPitch:
    """The corner calibration of an exact ``length_m`` x ``width_m`` rectangle centred at
    (centre_lat, centre_lon) degrees, +x at compass bearing ``bearing_deg`` (clockwise from
    true north); corners placed with ``pymap3d.enu2geodetic``. For tests and the demo."""
    if not (length_m > 0 and width_m > 0):
        raise ValueError("length_m and width_m must be positive")
    b = math.radians(bearing_deg)
    ux, uy = math.sin(b), math.cos(b)  # +x (east, north)
    vx, vy = -uy, ux  # +y, to the left of +x
    corners = {}
    for name, (sx, sy) in zip(CORNERS, CORNER_XY, strict=True):
        x, y = sx * length_m / 2, sy * width_m / 2
        lat, lon, _ = pymap3d.enu2geodetic(x * ux + y * vx, x * uy + y * vy, 0.0, centre_lat, centre_lon, 0.0,
                                           ell=WGS84, deg=True)
        corners[name] = {"lat": float(lat), "long": _wrap_lon(float(lon))}
    return GnssPitch.model_validate({"corners": corners})


def check_venue(pitch: PitchProjection, pitch_length: float | None, pitch_width: float | None,
                tolerance: float = VENUE_TOLERANCE) -> tuple[float, float]:
    """Raise :class:`CalibrationError` when a given meta ``pitch_length``/``pitch_width`` (m)
    differs from the calibration by more than ``tolerance`` (relative, 1% by the contract).
    Returns the pitch (length, width) to use: the meta's where given, else the calibration's."""
    out = []
    for name, given, cal in (("pitch_length", pitch_length, pitch.length_m),
                             ("pitch_width", pitch_width, pitch.width_m)):
        if given is None:
            out.append(cal)
            continue
        diff = abs(given - cal) / cal
        if not diff <= tolerance:
            raise CalibrationError(
                f"venue.{name}: {given:g} m differs from the GNSS calibration's {cal:.2f} m by {diff:.1%} "
                f"(at most {tolerance:.0%})", f"venue.{name}")
        out.append(float(given))
    return out[0], out[1]
