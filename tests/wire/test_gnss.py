"""GNSS fixes to pitch metres (docs/wearables.md, "GNSS coordinates"): accuracy against
geographiclib's geodesics (Karney 2013), the calibration checks and their messages.

Grounds are fictional. Reference distances and azimuths come from
``geographiclib.geodesic.Geodesic.WGS84`` (Karney 2013, "Algorithms for geodesics",
J. Geodesy 87:43-55), independent of pymap3d, which the projection uses.
"""
from __future__ import annotations

import math

import numpy as np
import pymap3d
import pytest
from geographiclib.geodesic import Geodesic
from hypothesis import given, settings as hsettings, strategies as st

from pacewire.config import load_settings
from pacewire.wire.gnss import (
    CORNERS,
    CalibrationError,
    GnssPitch,
    PitchProjection,
    check_venue,
    parse_calibration,
    rectangle,
)

GEOD = Geodesic.WGS84
LAT, LON, BEARING = 47.5, -30.0, 23.0  # a fictional ground in the Atlantic
L, W = 105.0, 68.0  # Laws of the Game: the recommended international pitch
CM, MM = 0.01, 0.001


def direct(lat: float, lon: float, azi: float, s: float) -> tuple[float, float]:
    """The point ``s`` metres from (lat, lon) along the geodesic at azimuth ``azi`` (Karney 2013)."""
    g = GEOD.Direct(lat, lon, azi, s)
    return g["lat2"], g["lon2"]


def xy(proj: PitchProjection, lat: float, lon: float) -> tuple[float, float]:
    x, y = proj.to_pitch(np.array([lat]), np.array([lon]))
    return float(x[0]), float(y[0])


def corners_dict(cal: GnssPitch) -> dict:
    return cal.model_dump()["corners"]


def from_pitch_points(proj: PitchProjection, pts: dict[str, tuple[float, float]]) -> dict:
    """A corner calibration whose flags stand at the given pitch points of ``proj``."""
    out = {}
    for name, (x, y) in pts.items():
        lat, lon = proj.to_gnss(np.array([x]), np.array([y]))
        out[name] = {"lat": float(lat[0]), "long": float(lon[0])}
    return {"corners": out}


EXACT = {"x_min_y_min": (-L / 2, -W / 2), "x_max_y_min": (L / 2, -W / 2),
         "x_max_y_max": (L / 2, W / 2), "x_min_y_max": (-L / 2, W / 2)}


@pytest.fixture(scope="module")
def pitch() -> PitchProjection:
    return PitchProjection.from_calibration(rectangle(LAT, LON, L, W, BEARING))


# --- accuracy -------------------------------------------------------------------------

@hsettings(max_examples=150, deadline=None)
@given(lat0=st.one_of(st.sampled_from([0.0, 45.0, 60.0, -35.0]), st.floats(-70, 70)),
       lon0=st.floats(-180, 180), bearing=st.floats(0, 360),
       az1=st.floats(0, 360), r1=st.floats(0, 80), az2=st.floats(0, 360), d=st.floats(0, 150))
def test_distances_match_geodesics(lat0, lon0, bearing, az1, r1, az2, d):
    """Two fixes up to 150 m apart on and around a pitch: their pitch distance is the
    WGS 84 geodesic distance (Karney 2013) within 1 cm."""
    proj = PitchProjection.from_calibration(rectangle(lat0, lon0, L, W, bearing))
    p1 = direct(lat0, lon0, az1, r1)
    p2 = direct(*p1, az2, d)
    x, y = proj.to_pitch(np.array([p1[0], p2[0]]), np.array([p1[1], p2[1]]))
    assert abs(math.hypot(x[1] - x[0], y[1] - y[0]) - GEOD.Inverse(*p1, *p2)["s12"]) < CM
    assert abs(math.hypot(x[0], y[0]) - r1) < CM  # and from the centre spot


@pytest.mark.parametrize("lat0", [0.0, 45.0, 60.0, -35.0])
@pytest.mark.parametrize("bearing", [0.0, 23.0, 90.0, 211.0])
def test_axes_follow_the_bearing(lat0, bearing):
    """+x points along the calibrated bearing and +y 90° to its left (counter-clockwise seen
    from above, i.e. bearing - 90°): 50 m geodesics that way land on the axes within 1 cm."""
    proj = PitchProjection.from_calibration(rectangle(lat0, 12.0, L, W, bearing))
    assert abs((proj.bearing_deg - bearing + 180) % 360 - 180) < 1e-6
    for azi, want in ((bearing, (50, 0)), (bearing - 90, (0, 50)), (bearing + 180, (-50, 0)), (bearing + 90, (0, -50))):
        got = xy(proj, *direct(lat0, 12.0, azi, 50.0))
        assert np.allclose(got, want, atol=CM), (azi, got)


def test_known_rectangle(pitch):
    """105 x 68 m at bearing 23°: sizes within 1 cm, corners at (±52.5, ±34) within 1 cm,
    corner-to-corner geodesics of 105 and 68 m (Karney 2013)."""
    assert abs(pitch.length_m - L) < CM and abs(pitch.width_m - W) < CM
    assert np.allclose(pitch.centre, (LAT, LON), atol=1e-9)
    cal = rectangle(LAT, LON, L, W, BEARING)
    c = corners_dict(cal)
    for name, want in EXACT.items():
        assert np.allclose(xy(pitch, c[name]["lat"], c[name]["long"]), want, atol=CM), name
    g = lambda a, b: GEOD.Inverse(c[a]["lat"], c[a]["long"], c[b]["lat"], c[b]["long"])["s12"]  # noqa: E731
    assert abs(g("x_min_y_min", "x_max_y_min") - L) < CM and abs(g("x_min_y_max", "x_max_y_max") - L) < CM
    assert abs(g("x_min_y_min", "x_min_y_max") - W) < CM and abs(g("x_max_y_min", "x_max_y_max") - W) < CM


def test_round_trip_and_shapes(pitch):
    rng = np.random.default_rng(3)
    x = rng.uniform(-65, 65, (40, 22))
    y = rng.uniform(-42.5, 42.5, (40, 22))
    lat, lon = pitch.to_gnss(x, y)
    x2, y2 = pitch.to_pitch(lat, lon)
    assert x2.shape == (40, 22) and np.abs(x2 - x).max() < MM and np.abs(y2 - y).max() < MM
    one = pitch.to_pitch(lat[0, :1], lon[0, :1])  # a one-element array
    assert one[0].shape == (1,) and abs(one[0][0] - x[0, 0]) < MM and abs(one[1][0] - y[0, 0]) < MM
    lat1, lon1 = pitch.to_gnss(np.array([x[3, 4]]), np.array([y[3, 4]]))
    assert lat1.shape == (1,) and abs(lat1[0] - lat[3, 4]) < 1e-12 and abs(lon1[0] - lon[3, 4]) < 1e-12
    assert all(np.isnan(v).all() for v in pitch.to_pitch(np.array([np.nan]), np.array([np.nan])))


def test_across_the_antimeridian():
    """A pitch straddling longitude ±180° (centre at 179.9997°E: the corners fall on both sides)."""
    cal = rectangle(-16.5, 179.9997, L, W, 0.0)
    lons = [p["long"] for p in corners_dict(cal).values()]
    assert min(lons) < -179.99 and max(lons) > 179.99
    proj = PitchProjection.from_calibration(cal)
    assert abs(proj.length_m - L) < CM and abs(proj.width_m - W) < CM
    assert abs(proj.centre[1] - 179.9997) < 1e-9
    p = direct(-16.5, 179.9997, 0.0, 40.0)  # 40 m along +x (north), across the line
    assert np.allclose(xy(proj, *p), (40, 0), atol=CM)
    assert np.allclose(xy(proj, p[0], p[1] - 360 if p[1] > 0 else p[1] + 360), (40, 0), atol=CM)


def test_goal_centres_form_matches_corners(pitch):
    """Goal-line centres placed independently with pymap3d give the same projection."""
    b = math.radians(BEARING)
    goal = {}
    for name, s in (("x_min", -1), ("x_max", 1)):
        lat, lon, _ = pymap3d.enu2geodetic(s * L / 2 * math.sin(b), s * L / 2 * math.cos(b), 0.0, LAT, LON, 0.0)
        goal[name] = {"lat": float(lat), "long": float(lon)}
    proj = PitchProjection.from_calibration(parse_calibration({"goal_centres": goal, "width_m": W}))
    assert abs(proj.length_m - L) < CM and proj.width_m == W
    rng = np.random.default_rng(5)
    lat, lon = pitch.to_gnss(rng.uniform(-65, 65, 200), rng.uniform(-42.5, 42.5, 200))
    a, b2 = pitch.to_pitch(lat, lon), proj.to_pitch(lat, lon)
    assert np.abs(a[0] - b2[0]).max() < MM and np.abs(a[1] - b2[1]).max() < MM


# --- calibration checks ---------------------------------------------------------------

def _move(cal: dict, name: str, azi: float, s: float) -> dict:
    out = {"corners": {k: dict(v) for k, v in cal["corners"].items()}}
    p = out["corners"][name]
    p["lat"], p["long"] = direct(p["lat"], p["long"], azi, s)
    return out


@pytest.mark.parametrize("name", CORNERS)
@pytest.mark.parametrize("how", ["north", "east", "outward", "inward"])
def test_a_corner_moved_3_m_is_named(name, how):
    """A flag 3 m off (a typo in lat or long, or surveyed in the wrong place) is named."""
    cal = rectangle(LAT, LON, L, W, BEARING).model_dump()
    sx, sy = EXACT[name]
    diagonal = (BEARING + math.degrees(math.atan2(-sy, sx))) % 360  # compass bearing of the corner from the centre
    azi = {"north": 0.0, "east": 90.0, "outward": diagonal, "inward": diagonal + 180}[how]
    with pytest.raises(CalibrationError) as exc:
        PitchProjection.from_calibration(parse_calibration(_move(cal, name, azi, 3.0)))
    msg = str(exc.value)
    assert msg.startswith(f"venue.gnss_pitch.corners.{name}: "), msg
    assert exc.value.key == f"venue.gnss_pitch.corners.{name}"
    assert "3.00 m" in msg  # how far it is from where the other three put it


def test_angle_error_names_the_corner(pitch):
    """x_max_y_max 1.0 m along x and 0.6 m along y: sides within 1% (0.95%, 0.88%) but its angle
    is 88.8°, more than 1° from square."""
    pts = dict(EXACT, x_max_y_max=(L / 2 + 1.0, W / 2 + 0.6))
    with pytest.raises(CalibrationError) as exc:
        PitchProjection.from_calibration(parse_calibration(from_pitch_points(pitch, pts)))
    assert str(exc.value).startswith("venue.gnss_pitch.corners.x_max_y_max: angle 88.8° is not within 1° "
                                     "of a right angle"), str(exc.value)
    # the same with a looser tolerance (the config's [gnss] angle_tolerance_deg) passes
    PitchProjection.from_calibration(parse_calibration(from_pitch_points(pitch, pts)), angle_tolerance_deg=1.5)


@pytest.mark.parametrize("pair", ["touchlines", "goal lines"])
def test_side_mismatch(pitch, pair):
    """docs/wearables.md: opposite sides within 1%. The y_max touchline (or x_max goal line) shortened
    symmetrically, so the angles stay within 1°: 1.2% is refused, 0.8% accepted."""
    def cal(share: float) -> dict:
        if pair == "touchlines":
            d = share * L / (1 - share / 2) / 2  # diff / mean = share
            pts = dict(EXACT, x_max_y_max=(L / 2 - d, W / 2), x_min_y_max=(-L / 2 + d, W / 2))
        else:
            d = share * W / (1 - share / 2) / 2
            pts = dict(EXACT, x_max_y_min=(L / 2, -W / 2 + d), x_max_y_max=(L / 2, W / 2 - d))
        return parse_calibration(from_pitch_points(pitch, pts))

    PitchProjection.from_calibration(cal(0.008))
    with pytest.raises(CalibrationError, match=rf"^venue\.gnss_pitch\.corners\.x_m.._y_m..: the {pair} differ "
                                               r"by 1\.2% \(.* at most 1\.0%\)"):
        PitchProjection.from_calibration(cal(0.012))
    PitchProjection.from_calibration(cal(0.012), side_tolerance=0.015)


def test_mirrored_corners():
    """y_min and y_max swapped: a perfect rectangle of the wrong handedness."""
    c = corners_dict(rectangle(LAT, LON, L, W, BEARING))
    swapped = {"x_min_y_min": c["x_min_y_max"], "x_max_y_min": c["x_max_y_max"],
               "x_max_y_max": c["x_max_y_min"], "x_min_y_max": c["x_min_y_min"]}
    with pytest.raises(CalibrationError, match=r"^venue\.gnss_pitch\.corners\.x_min_y_max: .*mirrored"):
        PitchProjection.from_calibration(parse_calibration({"corners": swapped}))
    diagonal = dict(c, x_min_y_min=c["x_max_y_max"], x_max_y_max=c["x_min_y_min"])  # also a mirror image
    with pytest.raises(CalibrationError, match=r"^venue\.gnss_pitch\.corners\.x_min_y_max: .*mirrored"):
        PitchProjection.from_calibration(parse_calibration({"corners": diagonal}))


def test_lat_and_long_swapped_everywhere_is_refused():
    c = corners_dict(rectangle(LAT, LON, L, W, BEARING))
    swapped = {k: {"lat": v["long"], "long": v["lat"]} for k, v in c.items()}
    with pytest.raises(CalibrationError, match=r"^venue\.gnss_pitch\.corners\.x_m.._y_m..: "):
        PitchProjection.from_calibration(parse_calibration({"corners": swapped}))


def test_exchanged_corners_and_a_repeated_flag():
    c = corners_dict(rectangle(LAT, LON, L, W, BEARING))
    crossed = dict(c, x_max_y_min=c["x_max_y_max"], x_max_y_max=c["x_max_y_min"])
    with pytest.raises(CalibrationError, match=r"^venue\.gnss_pitch\.corners\.x_max_y_min: x_max_y_min and "
                                               r"x_max_y_max look exchanged"):
        PitchProjection.from_calibration(parse_calibration({"corners": crossed}))
    crossed = dict(c, x_min_y_max=c["x_min_y_min"], x_min_y_min=c["x_min_y_max"])
    with pytest.raises(CalibrationError, match=r"^venue\.gnss_pitch\.corners\.x_min_y_max: x_min_y_max and "
                                               r"x_min_y_min look exchanged"):
        PitchProjection.from_calibration(parse_calibration({"corners": crossed}))
    with pytest.raises(CalibrationError, match=r"^venue\.gnss_pitch\.corners\.x_max_y_min: is 0\.00 m from "
                                               r"x_min_y_min"):
        PitchProjection.from_calibration(parse_calibration({"corners": dict(c, x_max_y_min=c["x_min_y_min"])}))
    goal = {"x_min": c["x_min_y_min"], "x_max": c["x_min_y_min"]}
    with pytest.raises(CalibrationError, match=r"^venue\.gnss_pitch\.goal_centres\.x_max: is 0\.00 m"):
        PitchProjection.from_calibration(parse_calibration({"goal_centres": goal, "width_m": W}))


_C = rectangle(LAT, LON, L, W, BEARING).model_dump()["corners"]
_G = {"x_min": {"lat": LAT, "long": LON}, "x_max": {"lat": LAT, "long": LON + 0.001}}


@pytest.mark.parametrize("data,key,words", [
    ({"corners": {k: v for k, v in _C.items() if k != "x_max_y_max"}}, "corners.x_max_y_max", "Field required"),
    ({"corners": {**_C, "x_max_y_maxx": _C["x_max_y_max"]}}, "corners.x_max_y_maxx", "Extra inputs"),
    ({"corners": _C, "goal_centres": _G, "width_m": W}, "", "not both"),
    ({}, "", "needs corners, or goal_centres"),
    ({"goal_centres": _G}, "", "needs width_m"),
    ({"corners": _C, "width_m": W}, "", "width_m goes with goal_centres only"),
    ({"goal_centres": _G, "width_m": 0}, "width_m", "greater than 0"),
    ({"goal_centres": {"x_min": _G["x_min"]}, "width_m": W}, "goal_centres.x_max", "Field required"),
    ({"corners": {**_C, "x_min_y_min": {"lat": 91.0, "long": 0.0}}}, "corners.x_min_y_min.lat",
     "less than or equal to 90"),
    ({"corners": {**_C, "x_min_y_min": {"lat": 47.5, "long": -181}}}, "corners.x_min_y_min.long",
     "greater than or equal to -180"),
    ({"corners": {**_C, "x_min_y_min": {"lat": float("nan"), "long": 0}}}, "corners.x_min_y_min.lat", "finite"),
    ({"corners": {**_C, "x_min_y_min": {"lat": "47.5", "long": 0}}}, "corners.x_min_y_min.lat", "valid number"),
    ({"corners": {**_C, "x_min_y_min": {"lat": 47.5, "lon": -30.0}}}, "corners.x_min_y_min.lon", "Extra inputs"),
    ({"corner": _C}, "corner", "Extra inputs"),
    ([1, 2], "", "valid dictionary"),
])
def test_malformed_calibration_names_the_key(data, key, words):
    with pytest.raises(CalibrationError) as exc:
        parse_calibration(data)
    want = "venue.gnss_pitch" + (f".{key}" if key else "")
    assert f"{want}: " in str(exc.value) and words in str(exc.value), str(exc.value)
    assert str(exc.value).startswith(exc.value.key + ": ")  # the first key at fault


def test_rectangle_rejects_a_degenerate_size():
    with pytest.raises(ValueError):
        rectangle(LAT, LON, 0.0, W, 0.0)


# --- the venue sizes and the config ---------------------------------------------------

def test_check_venue(pitch):
    assert check_venue(pitch, 105.5, 67.5) == (105.5, 67.5)  # 0.5% and 0.7%: within 1%
    length, width = check_venue(pitch, None, None)  # the calibration supplies them
    assert abs(length - L) < CM and abs(width - W) < CM
    with pytest.raises(CalibrationError, match=r"^venue\.pitch_length: 100 m differs from the GNSS calibration's "
                                               r"105\.00 m by 4\.8% \(at most 1%\)") as exc:
        check_venue(pitch, 100.0, None)
    assert exc.value.key == "venue.pitch_length"
    with pytest.raises(CalibrationError, match=r"^venue\.pitch_width: "):
        check_venue(pitch, 105.0, 68.0 * 1.012)


def test_config_tolerances():
    s = load_settings()
    assert (s.gnss.side_tolerance, s.gnss.angle_tolerance_deg) == (0.01, 1.0)  # docs/wearables.md, "Checks on arrival"
