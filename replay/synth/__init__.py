"""Synthetic demo match generator: a fictional match written as a CDF folder.

Everything here is invented: the clubs, the venue, the players and the match.
The output is a CDF v0.3.2 recording folder:

* ``meta.json``      CDF meta (match id, teams, fps, pitch 105 x 68 m, periods)
* ``match.json``     CDF match sheet (rosters with position groups, result,
  goals, substitutions, cards, officials, vendor)
* ``tracking.jsonl.gz`` (or ``tracking.jsonl``) one CDF tracking frame per line
* ``faults.json``    the feed faults deliberately injected (empty list if none)

``--wearables`` writes the one-team GNSS + heart-rate variant of the same match
(docs/wearables.md): the home team only (the away team keeps its id and name,
no players), each player entry with ``lat``/``long`` as well as ``x``/``y``, no
ball, a pitch calibration under ``venue.gnss_pitch``, heart-rate profiles on the
sheet, and ``hr.jsonl`` (1 Hz samples; see plan_wearables).

Coordinates are metres with the origin at the centre spot, x along the
touchlines (|x| <= 52.5) and y along the goal lines (|y| <= 34). The home team
attacks +x in the first half and the teams change ends at half-time.

Movement model
--------------
The ball is generated first as a chain of actions (passes, carries, shots,
stoppages). Each team's formation anchors follow the (lagged) ball and the
possession state; every player then steers, at ``fps``, towards a moving
target (anchor + personal wander, or a run target during a burst) with a
commanded speed drawn from his position's locomotor profile plus runs (bursts)
at a share of his own top speed. Velocity follows the command through a
second-order model whose forward acceleration falls with speed (see steering);
velocity commands ramp up and down at kick-off, the whistle and substitutions.
The nearest outfield player of each team goes to the ball (receiver/carrier and
presser). Intensity falls over the match, late in each half and for some minutes
after a cluster of runs; substitutes come on fresh (fatigue; Mohr et al. 2003;
Bradley & Noakes 2013). Position targets: total distance (Bradley et al. 2009;
Osgnach et al. 2010), high-speed running and sprints (Di Salvo et al. 2009).

Modules, in the order the match is made
---------------------------------------
* ``clubs``      the fictional clubs, squads, formations, officials, venue and pitch
* ``timeline``   kick-off, the halves as frame slots, their times
* ``roles``      locomotor profiles of the playing positions
* ``athletes``   each squad member's own top speed, acceleration capacity and work rate
* ``fatigue``    intensity over the match and each half, transient fatigue, fresh substitutes
* ``bursts``     the sprints and high-speed runs of a half, and how they start and stop
* ``anchors``    formation anchors: the team shape around the ball
* ``events``     substitutions, goals and cards, planned first
* ``ball``       the ball's action chain of a half, sampled per frame
* ``plans``      per-player commands of a half: targets, speeds, bursts
* ``steering``   the second-order steering model that integrates them into paths
* ``match``      SynthMatch and simulate_match, which puts it all together
* ``faults``     the injected feed faults (faults.json)
* ``artefacts``  tracking artefacts, off by default: re-acquisition slides, camera-view gaps, GNSS errors
* ``wearables``  the wearables variant: units, heart rate and its faults, GNSS
* ``documents``  meta.json and match.json
* ``lines``      the JSON lines of tracking.jsonl and hr.jsonl
* ``folder``     write_match: the recording folder on disk; write_twin: its post-processed twin
* ``stats``      per-role movement statistics (``--stats``)
* ``positions``  the engine's figures of a written match by position (what the tests check)
* ``cli``        ``pacewire synth``

The random draws come from one numpy Generator per stream (the match, the
faults, the wearables) in a fixed order, so the same arguments give
byte-identical files.
"""

from pacewire.replay.synth.cli import main
from pacewire.replay.synth.documents import build_meta, build_sheet
from pacewire.replay.synth.folder import write_match, write_twin
from pacewire.replay.synth.match import SynthMatch, simulate_match
from pacewire.replay.synth.stats import movement_stats
from pacewire.replay.synth.wearables import plan_wearables

__all__ = [
    "write_match", "write_twin", "simulate_match", "plan_wearables", "movement_stats", "main", "SynthMatch",
    "build_meta", "build_sheet",
]
