"""The fictional fixture: both clubs with their squads and formations, the officials,
the venue and its pitch. Everything here is invented.

Coordinates are metres with the origin at the centre spot, x along the
touchlines (|x| <= 52.5) and y along the goal lines (|y| <= 34).
"""

from __future__ import annotations

from dataclasses import dataclass

PITCH_LENGTH_M = 105.0
PITCH_WIDTH_M = 68.0
HALF_LENGTH_M = PITCH_LENGTH_M / 2.0  # 52.5
HALF_WIDTH_M = PITCH_WIDTH_M / 2.0  # 34.0

# CDF position groups of the squad positions (match sheet)
POSITION_GROUP = {
    "GK": "GK", "LCB": "DF", "RCB": "DF", "CB": "DF", "LB": "DF", "RB": "DF",
    "LCM": "MF", "RCM": "MF", "CM": "MF", "CDM": "MF", "LM": "MF", "RM": "MF",
    "LW": "FW", "RW": "FW", "LCF": "FW", "RCF": "FW", "CF": "FW",
}

# Formation slots in the team's attacking frame (attacking +x; +y is the left
# side): (position, x offset from the block centre, y) in metres.
FORMATIONS: dict[str, list[tuple[str, float, float]]] = {
    "4-4-2": [
        ("GK", 0.0, 0.0),
        ("LB", -14.0, 22.0), ("LCB", -18.0, 8.0), ("RCB", -18.0, -8.0), ("RB", -14.0, -22.0),
        ("LM", -1.0, 22.0), ("LCM", -3.0, 7.0), ("RCM", -3.0, -7.0), ("RM", -1.0, -22.0),
        ("LCF", 12.0, 6.0), ("RCF", 12.0, -6.0),
    ],
    "4-3-3": [
        ("GK", 0.0, 0.0),
        ("LB", -14.0, 22.0), ("LCB", -18.0, 8.0), ("RCB", -18.0, -8.0), ("RB", -14.0, -22.0),
        ("CM", -7.0, 0.0), ("LCM", 0.0, 13.0), ("RCM", 0.0, -13.0),
        ("LW", 12.0, 22.0), ("CF", 14.0, 0.0), ("RW", 12.0, -22.0),
    ],
}


@dataclass(frozen=True)
class Club:
    """An invented club: ids, names, formation, squad (starters then bench)."""

    team_id: str
    name: str
    short: str
    colour: str
    formation: str
    coach: tuple[str, str]
    # (jersey, first name, last name, position); first 11 follow the formation
    squad: tuple[tuple[int, str, str, str], ...]
    # substitutions: (fraction of the second half, starter index out, bench index in)
    subs: tuple[tuple[float, int, int], ...]


HOME = Club(
    team_id="t_quillhaven",
    name="Quillhaven Tide",
    short="QHT",
    colour="#1D4E89",
    formation="4-4-2",
    coach=("Maren", "Ostrowell"),
    squad=(
        (1, "Oren", "Falkmoor", "GK"), (3, "Tavi", "Brennock", "LB"),
        (5, "Jory", "Hallowmere", "LCB"), (4, "Cael", "Duskinford", "RCB"),
        (2, "Emrys", "Wendlecote", "RB"), (11, "Perrin", "Soskell", "LM"),
        (8, "Idrin", "Marrowby", "LCM"), (6, "Lazlo", "Quennet", "RCM"),
        (7, "Tobin", "Achterly", "RM"), (10, "Anselm", "Pikering", "LCF"),
        (9, "Rurik", "Vandersloe", "RCF"),
        (13, "Helmer", "Grausby", "GK"), (15, "Kestrel", "Imbry", "DF"),
        (14, "Oswin", "Tarrant-Velle", "MF"), (17, "Fenwick", "Ludmore", "MF"),
        (19, "Dace", "Orrinhall", "FW"),
    ),
    subs=((0.27, 8, 14), (0.54, 9, 15), (0.73, 1, 12)),
)
AWAY = Club(
    team_id="t_corvane",
    name="Corvane Vale Rovers",
    short="CVR",
    colour="#B33A1B",
    formation="4-3-3",
    coach=("Ilse", "Braddenholt"),
    squad=(
        (1, "Sindre", "Korvath", "GK"), (3, "Albin", "Stroudley", "LB"),
        (6, "Mattias", "Eldergrove", "LCB"), (5, "Ruan", "Pellowick", "RCB"),
        (2, "Corin", "Vasquell", "RB"), (4, "Teodor", "Hesketh-Lune", "CM"),
        (8, "Yannic", "Obelmont", "LCM"), (10, "Ludo", "Farrowdale", "RCM"),
        (11, "Essa", "Moranth", "LW"), (9, "Bram", "Quillon", "CF"),
        (7, "Niall", "Ashcombe-Rye", "RW"),
        (12, "Gisli", "Thornquay", "GK"), (16, "Pim", "Ravelstoke", "DF"),
        (18, "Arlo", "Dennimore", "MF"), (20, "Wystan", "Cobbelry", "FW"),
        (21, "Eero", "Lanthorne", "FW"),
    ),
    subs=((0.375, 6, 13), (0.65, 9, 14)),
)
CLUBS = (HOME, AWAY)
OFFICIALS = (
    ("o_ref", "Halvard", "Mistelburn", "main_referee"),
    ("o_ar1", "Sunniva", "Okkerlund", "assistant_referee"),
    ("o_ar2", "Teague", "Brambury", "assistant_referee"),
    ("o_4th", "Orla", "Fennimore", "fourth_official"),
)
VENUE = {"id": "v_lanternmoor", "name": "Lanternmoor Park", "turf": "grass"}


def player_id(club: Club, jersey: int) -> str:
    """Stable player id: club short code and jersey, such as ``qht_07``."""
    return f"{club.short.lower()}_{jersey:02d}"
