/* pacewire bench page: one live subscription, a local copy of the state, a plain DOM render.
   No framework, no build step, no external assets. Contract: README, "Consuming the stream". */
"use strict";

(function () {
  let COVERAGE_LOW = 0.8;        // below this share of frames seen, a player's figures are marked uncertain (config: reports.low_coverage)
  const STALE_AFTER_S = 3;       // "data is N s old" once nothing arrived for this long
  const OFFLINE_BANNER_S = 1;    // a dropped socket shows the banner after this long (hides blips)
  const EVERY_S = 1;             // delta cadence asked of the server
  const MATCHES_EVERY_MS = 5000; // match list refresh
  const REPORTS_EVERY_MS = 15000;
  const WATCHDOG_S = 25;         // silence this long on an open socket: check the server is still there

  const params = new URLSearchParams(location.search);
  const TOKEN = params.get("token");

  const PERIODS = {
    first_half: "1st half", second_half: "2nd half",
    first_half_extratime: "Extra time 1", second_half_extratime: "Extra time 2", shootout: "Penalties",
  };
  const STATE_WORDS = { ok: "Feed OK", degraded: "Feed degraded", stalled: "Feed stalled", finished: "Match over: no frames due" };
  const STATUS_WORDS = { not_started: "not started", live: "live", break: "break", ended: "ended" };
  const EVENT_WORDS = { ok: "Events OK", degraded: "Events degraded", stalled: "Events stalled" };
  // game phases, in the snapshot's order (README: figures by game phase)
  const PHASES = [["attack", "Attack"], ["defence", "Defence"], ["attacking_transition", "Won the ball"],
    ["defensive_transition", "Lost the ball"], ["dead_ball", "Dead ball"], ["unknown", "Unknown"]];
  const PHASE_LABEL = Object.fromEntries(PHASES);

  // Columns of the player table. `core`: shown by default (the essentials); the rest sit behind "More figures".
  // `bar`: a thin comparison bar under the number, only where comparing players is the point.
  const COLUMNS = [
    { key: "jersey_number", label: "No.", unit: "", kind: "text", cls: "jersey", core: true },
    { key: "name", label: "Player", unit: "", kind: "text", cls: "pname", core: true },
    { key: "team", label: "Team", unit: "", kind: "text", cls: "team", core: true },
    { key: "distance_m", label: "Distance", unit: "m", fmt: fmtInt, bar: true, core: true, tip: "Distance covered" },
    { key: "m_per_min", label: "Work rate", unit: "m/min", fmt: fmtInt, core: true, tip: "Metres per minute on the pitch" },
    { key: "hsr_m", label: "High-speed", unit: "m", fmt: fmtInt, bar: true, core: true, tip: "High-speed running distance (19.8–25.2 km/h)" },
    { key: "sprint_m", label: "Sprint", unit: "m", fmt: fmtInt, core: true, tip: "Sprint distance (over 25.2 km/h)" },
    { key: "sprints", label: "Sprints", unit: "count", fmt: fmtInt, core: true, tip: "Sprint efforts" },
    { key: "acc_dec", label: "Acc + dec", unit: "count", fmt: fmtInt, core: true, tip: "High accelerations plus high decelerations (± 3 m/s²)" },
    { key: "max_speed_ms", label: "Top speed", unit: "km/h", fmt: (v) => fmt1(v * 3.6), core: true, tip: "Highest speed (match or period only)" },
    { key: "peak_pct", label: "Last 5 min", unit: "% own peak", fmt: fmtInt, bar: true, core: true, live: true,
      tip: "Work rate over the last 5 minutes as a share of the player's own best 5 minutes this match (whatever the view)" },
    { key: "usual_pct", label: "This block", unit: "% of usual", fmt: fmtInt, core: true, live: true,
      tip: "Work rate in this 15-minute block of the match as a share of his usual for the same block (median of his own past live and replayed matches); ▾ under his usual band. Blank without enough history" },
    { key: "hsr_efforts", label: "HS runs", unit: "count", fmt: fmtInt, tip: "High-speed running efforts (sprints included)" },
    { key: "accels", label: "Accels", unit: "count", fmt: fmtInt, tip: "High accelerations" },
    { key: "decels", label: "Decels", unit: "count", fmt: fmtInt, tip: "High decelerations" },
    { key: "high_power_m", label: "High power", unit: "m", fmt: fmtInt, tip: "Distance at high metabolic power" },
    { key: "metabolic_power_wkg", label: "Met. power", unit: "W/kg", fmt: fmt1, tip: "Average metabolic power" },
    { key: "energy_jkg", label: "Energy", unit: "kJ/kg", fmt: (v) => fmt1(v / 1000), tip: "Energy spent per kilogram" },
    { key: "speed_ms", label: "Speed now", unit: "km/h", fmt: (v) => fmt1(v * 3.6), tip: "Current speed" },
    { key: "minutes", label: "Time", unit: "min", fmt: fmt1, tip: "Minutes on the pitch; in a window, the window's length" },
    { key: "coverage", label: "Seen", unit: "% frames", fmt: fmtPct, cls: "cov", tip: "Share of frames on the pitch in which the player was seen, tracking artefacts taken out" },
    // heart rate (docs/wearables.md): shown only once the match has heart-rate samples; % HRmax is an essential
    { key: "hr_bpm", label: "HR now", unit: "bpm", fmt: fmtInt, hr: true, tip: "Latest heart rate (live, whatever the window)" },
    { key: "hr_pct_max", label: "% HRmax", unit: "%", fmt: fmtInt, hr: true, core: true, tip: "Latest heart rate as a share of the player's maximum (live)" },
    { key: "hr_mean_bpm", label: "HR mean", unit: "bpm", fmt: fmtInt, hr: true, tip: "Time-weighted mean heart rate over the chosen span" },
    { key: "trimp_edwards", label: "TRIMP", unit: "Edwards", fmt: fmt1, hr: true, tip: "Training impulse: minutes in each heart-rate zone × 1 to 5 (Edwards 1993)" },
    { key: "hr_coverage", label: "HR seen", unit: "% samples", fmt: fmtPct, cls: "hrcov", hr: true, tip: "Share of expected heart-rate samples received while on the pitch" },
    { key: "zones", label: "Speed bands", unit: "m per band", kind: "zones", cls: "zones", tip: "Distance in each speed band, slow to fast (not sortable)" },
  ];
  // the first drop-off rule against the player's own peak (config [[alerts.rules]]), from /page-settings.json
  const PEAK = { share: null, window_min: 5, min_on_pitch_min: 15 };
  const BY_KEY = Object.fromEntries(COLUMNS.map((c) => [c.key, c]));
  const LIVE_HR = new Set(["hr_bpm", "hr_pct_max"]); // the latest sample, whatever the window

  const S = {
    matchId: null,
    state: null,            // {players, teams, health}
    env: { match_time_s: 0, period: null },
    periodEnded: false,
    stalledSince: null,     // performance.now() at which the frames stopped, when stalled
    stallSeen: false,       // the page saw the feed go from live to stalled (else the start is a lower bound)
    lastSeq: null,
    lastMsgAt: null,        // performance.now() of the last message
    conn: "connecting",
    closedAt: null,
    attempts: 0,
    alerts: [],
    reports: [],
    matches: [],
    sort: { col: null, dir: "desc" },
    team: "both",
    win: "cumulative",
    windowKeys: [],
    notice: "",
    connText: "",
    matchStatus: null,      // not_started, live, break, ended: the snapshot's match_status and status messages
    matchesLoaded: false,
    authError: "",
    more: false,            // "More figures": every column, not only the essentials
    showUnused: false,      // the players who have not played, listed instead of one line
  };
  let ws = null;
  let reconnectTimer = null;
  let renderQueued = false;

  const $ = (sel) => document.querySelector(sel);

  // -- formatting ------------------------------------------------------------------------------------
  function fmtInt(v) { return Math.round(v).toLocaleString("en-GB"); }
  function fmt1(v) { return (Math.round(v * 10) / 10).toLocaleString("en-GB", { minimumFractionDigits: 1, maximumFractionDigits: 1 }); }
  function fmtPct(v) { return Math.round(v * 100) + " %"; }
  function fmtClock(t) {
    if (t == null || !isFinite(t)) return "--:--";
    const s = Math.max(0, Math.floor(t));
    return String(Math.floor(s / 60)).padStart(2, "0") + ":" + String(s % 60).padStart(2, "0");
  }
  function fmtSeconds(v) { return v == null ? "–" : (Math.abs(v) < 10 ? v.toFixed(2) : v.toFixed(0)) + " s"; }
  function fmtDuration(s) {
    s = Math.abs(s);
    if (s < 120) return Math.round(s) + " s";
    if (s < 7200) return Math.round(s / 60) + " min";
    if (s < 172800) return Math.round(s / 3600) + " h";
    return Math.round(s / 86400) + " days";
  }
  // a kick-off time as the bench reads it: the browser's own time zone, named
  function fmtKickoff(iso) {
    const t = iso ? Date.parse(iso) : NaN;
    if (!isFinite(t)) return "";
    return new Intl.DateTimeFormat("en-GB", { day: "numeric", month: "short", year: "numeric",
      hour: "2-digit", minute: "2-digit", timeZoneName: "short" }).format(new Date(t));
  }
  function cap(s) { return s ? s[0].toUpperCase() + s.slice(1) : s; }
  function esc(s) {
    return String(s).replace(/[&<>"']/g, (c) => ({ "&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;", "'": "&#39;" })[c]);
  }
  function shortName(name) {
    const words = String(name).split(/\s+/).filter(Boolean);
    if (words.length > 1) return words.slice(0, 3).map((w) => w[0]).join("").toUpperCase();
    return String(name).slice(0, 3).toUpperCase();
  }
  function windowLabel(key) {
    if (key === "cumulative") return "Match so far";
    if (key === "period") return "This period";
    let m = /^last_(\d+)min$/.exec(key);
    if (m) return "Last " + m[1] + " min";
    m = /^peak_(\d+)min$/.exec(key);
    if (m) return "Peak " + m[1] + " min";
    m = /^phase:(.+)$/.exec(key);
    if (m) return PHASE_LABEL[m[1]] || m[1];
    return key;
  }
  function bandLabel(name) {
    let m = /^(\d+(?:\.\d+)?)-(\d+(?:\.\d+)?)$/.exec(name);
    if (m) return fmt1(+m[1] * 3.6) + "–" + fmt1(+m[2] * 3.6) + " km/h";
    m = /^(\d+(?:\.\d+)?)\+$/.exec(name);
    if (m) return "over " + fmt1(+m[1] * 3.6) + " km/h";
    return name; // relative bands are already "% of max speed"
  }

  // -- server access -----------------------------------------------------------------------------------------
  function apiUrl(path) {
    const u = new URL(path, location.href);
    if (TOKEN) u.searchParams.set("token", TOKEN);
    return u;
  }
  async function getJSON(path) {
    const r = await fetch(apiUrl(path), { cache: "no-store" });
    if (!r.ok) {
      const err = new Error(path + ": HTTP " + r.status);
      err.status = r.status;
      throw err;
    }
    return r.json();
  }

  async function refreshMatches() {
    try {
      const body = await getJSON("api/matches");
      S.matches = body.matches || [];
    } catch (e) {
      if (e.status === 401) {
        $("#match-picker").innerHTML = '<option value="">Needs a view token: open this page with ?token=…</option>';
        $("#match-picker").dataset.sig = "";
        S.authError = TOKEN ? "Token refused" : "Needs a view token";
        setConn("closed", S.authError);
      }
      return; // otherwise keep the last list: the connection status already tells the user
    }
    S.authError = "";
    S.matchesLoaded = true;
    renderPicker();
    renderStatus();
    if (!S.matchId && S.matches.length) {
      const wanted = params.get("match") || safeStorage("pacewire.match");
      const pick = S.matches.find((m) => m.match_id === wanted) || S.matches[0];
      selectMatch(pick.match_id);
    }
  }

  async function refreshReports() {
    if (!S.matchId) return;
    try {
      const body = await getJSON("api/matches/" + encodeURIComponent(S.matchId) + "/reports");
      S.reports = Array.isArray(body.reports) ? body.reports : [];
      renderReports();
    } catch (e) { /* keep the last list */ }
  }

  function safeStorage(key, value) {
    try {
      if (value === undefined) return localStorage.getItem(key);
      localStorage.setItem(key, value);
    } catch (e) { return null; }
    return null;
  }

  function selectMatch(id) {
    if (id === S.matchId) return;
    S.matchId = id;
    S.state = null;
    S.lastSeq = null;
    S.lastMsgAt = null;
    S.alerts = [];
    S.reports = [];
    S.periodEnded = false;
    S.matchStatus = null;
    S.stalledSince = null;
    S.stallSeen = false;
    S.attempts = 0;
    S.showUnused = false;
    safeStorage("pacewire.match", id);
    const u = new URL(location.href);
    u.searchParams.set("match", id);
    history.replaceState(null, "", u);
    $("#match-picker").value = id;
    renderAlerts();
    renderReports();
    connect();
    refreshReports();
    scheduleRender();
  }

  // -- live subscription ---------------------------------------------------------------------------------------
  function connect() {
    clearTimeout(reconnectTimer);
    if (ws) {
      const old = ws;
      ws = null;
      old.onclose = old.onmessage = old.onerror = null;
      try { old.close(); } catch (e) { /* already closed */ }
    }
    if (!S.matchId) return;
    const u = apiUrl("live/" + encodeURIComponent(S.matchId));
    u.protocol = location.protocol === "https:" ? "wss:" : "ws:";
    u.searchParams.set("every", String(EVERY_S));
    // resume after the last message we hold; with nothing past a snapshot at 0, a fresh snapshot is as
    // good, and "since=0" cannot tell this server's stream from a restarted server's new one
    if (S.lastSeq) u.searchParams.set("since", String(S.lastSeq));
    setConn("connecting", S.attempts ? "Reconnecting (try " + (S.attempts + 1) + ")…" : "Connecting…");
    const sock = new WebSocket(u);
    ws = sock;
    sock.onopen = () => {
      if (sock !== ws) return;
      setConn("open", "Connected");
      S.openedAt = performance.now();
    };
    sock.onmessage = (ev) => {
      if (sock !== ws) return;
      let msg;
      try { msg = JSON.parse(ev.data); } catch (e) { return; }
      onMessage(msg);
    };
    sock.onclose = () => {
      if (sock !== ws) return;
      ws = null;
      scheduleReconnect();
    };
  }

  function scheduleReconnect() {
    S.attempts += 1;
    const delay = Math.min(500 * 2 ** (S.attempts - 1), 3000);
    const why = S.notice ? "Refused: " + S.notice : "No connection";
    setConn("closed", why + " · retry in " + Math.max(1, Math.round(delay / 1000)) + " s");
    reconnectTimer = setTimeout(connect, delay);
  }

  function setConn(kind, text) {
    if (kind !== "open" && S.conn === "open") S.closedAt = performance.now();
    if (kind === "open") S.closedAt = null;
    S.conn = kind;
    S.connText = text;
    $("#conn").dataset.conn = kind;
    renderStatus();
    renderBanner();
  }

  function applyDelta(target, delta) {
    for (const k of Object.keys(delta)) {
      const v = delta[k];
      if (v !== null && typeof v === "object" && !Array.isArray(v) &&
          target[k] !== null && typeof target[k] === "object" && !Array.isArray(target[k])) {
        applyDelta(target[k], v);
      } else {
        target[k] = v;
      }
    }
  }

  function onMessage(msg) {
    if (msg.match_id && msg.match_id !== S.matchId) return;
    if (msg.type === "error") {
      S.notice = (msg.message || msg.code || "error");
      setConn(S.conn, "Server said: " + S.notice);
      return;
    }
    if (msg.type === "snapshot") {
      S.state = { players: msg.players || {}, teams: msg.teams || {}, health: msg.health || {} };
      S.lastSeq = msg.seq;
      if (Array.isArray(msg.alerts)) { // the alerts raised so far (kept by the server): newest first here
        S.alerts = msg.alerts.slice(-50).reverse();
        renderAlerts();
      }
    } else {
      if (S.state === null) { S.lastSeq = null; connect(); return; } // no base to apply to: start afresh
      if (msg.seq <= S.lastSeq) return; // already applied
      if (msg.seq !== S.lastSeq + 1) { connect(); return; } // a gap: ask again from the last one we hold
      S.lastSeq = msg.seq;
      if (msg.type === "delta") {
        const body = {};
        for (const k of ["players", "teams", "health"]) if (k in msg) body[k] = msg[k];
        applyDelta(S.state, body);
      } else if (msg.type === "health") {
        S.state.health = msg.health || S.state.health;
      } else if (msg.type === "period") {
        S.periodEnded = msg.event === "end";
      } else if (msg.type === "status") {
        refreshReports();
      } else if (msg.type === "alert") {
        S.alerts.unshift({ ...msg, received: Date.now() });
        S.alerts.length = Math.min(S.alerts.length, 50);
        renderAlerts();
      } else if (msg.type === "report") {
        if (msg.url && !S.reports.some((r) => r.url === msg.url)) S.reports.push({ kind: msg.kind, url: msg.url });
        renderReports();
        refreshReports();
      }
    }
    if (msg.type === "snapshot" || msg.type === "delta") {
      if (msg.period !== S.env.period && msg.period) S.periodEnded = false;
    }
    if (typeof msg.match_status === "string") S.matchStatus = msg.match_status;
    S.env = { match_time_s: msg.match_time_s, period: msg.period };
    const stalled = S.state && S.state.health && S.state.health.state === "stalled";
    if (!stalled) {
      S.stalledSince = null;
      S.stallSeen = S.state !== null; // the next stall starts while we watch
    } else if (S.stalledSince == null) {
      S.stalledSince = performance.now() - stalledAfter(S.state.health) * 1000;
      if (msg.type === "snapshot") S.stallSeen = false; // stalled before we came: its start is a guess
    }
    S.lastMsgAt = performance.now();
    S.attempts = 0;
    S.notice = "";
    if (S.conn !== "open") setConn("open", "Connected");
    scheduleRender();
  }

  // -- rendering ---------------------------------------------------------------------------------------------------
  function scheduleRender() {
    if (renderQueued) return;
    renderQueued = true;
    requestAnimationFrame(() => { renderQueued = false; render(); });
  }

  // heart-rate fields appear once the match has a heart-rate sample (like possession with a ball)
  function hasHeartRate(st) {
    return !!st && Object.values(st.players).some((p) => Object.keys(p).some((k) => k.startsWith("hr_")));
  }
  // a one-team (wearables) feed: the other team is `tracked: false` and has no figures
  function trackedTeams(teams) {
    return sidesOf(teams).filter((tid) => teams[tid].tracked !== false);
  }
  function oneTeam(st) {
    return !!st && Object.keys(st.teams).length > 1 && trackedTeams(st.teams).length === 1;
  }
  const activeColumns = () => COLUMNS.filter((c) => !c.hr || hasHeartRate(S.state));

  function render() {
    renderMatchLine();
    renderFeed();
    renderStatus();
    renderBanner();
    renderAge();
    renderTeams();
    renderChips();
    renderTable();
  }

  function sidesOf(teams) {
    const ids = Object.keys(teams || {});
    ids.sort((a, b) => (teams[a].side === "home" ? 0 : 1) - (teams[b].side === "home" ? 0 : 1));
    return ids;
  }

  function renderPicker() {
    const sel = $("#match-picker");
    const keep = S.matchId;
    if (!S.matches.length) {
      sel.innerHTML = '<option value="">No match set up yet</option>';
      sel.dataset.sig = "";
      return;
    }
    // newest kick-off first; each line tells its match apart: teams and score, kick-off, id, where it stands
    const kick = (m) => (m.kickoff_time ? Date.parse(m.kickoff_time) || 0 : 0);
    const list = [...S.matches].sort((a, b) => kick(b) - kick(a) || String(a.match_id).localeCompare(String(b.match_id)));
    const html = list.map((m) => {
      const ids = sidesOf(m.teams);
      const t = ids.map((id) => m.teams[id]);
      const score = t.length === 2 ? `${t[0].name} ${t[0].score ?? 0}–${t[1].score ?? 0} ${t[1].name}` : m.match_id;
      const where = STATUS_WORDS[m.status] || (m.period ? PERIODS[m.period] || m.period : "not started");
      const parts = [score, fmtKickoff(m.kickoff_time), m.match_id, where].filter(Boolean);
      return `<option value="${esc(m.match_id)}">${esc(parts.join(" · "))}</option>`;
    }).join("");
    if (sel.dataset.sig === html) return; // unchanged: leave an open list alone
    sel.dataset.sig = html;
    sel.innerHTML = html;
    if (keep) sel.value = keep;
  }

  function renderMatchLine() {
    $("#clock").textContent = S.state ? fmtClock(S.env.match_time_s) : "--:--";
    const per = $("#period");
    const label = S.env.period ? (PERIODS[S.env.period] || S.env.period) : "Not started";
    per.textContent = S.env.period && periodOver() ? label + " · ended" : label;
    per.dataset.period = S.env.period || "";
    const teams = S.state ? S.state.teams : {};
    const single = oneTeam(S.state);
    const tag = $("#tracking");
    tag.hidden = !single;
    if (single) {
      const tid = trackedTeams(teams)[0];
      tag.title = `Only ${teams[tid].name || tid} is tracked (a wearables feed): no figures for the other team, no comparison.`;
    }
    for (const tid of sidesOf(teams)) {
      const t = teams[tid];
      const side = t.side === "away" ? "away" : "home";
      const name = document.querySelector(`#scoreline .side-name[data-side="${side}"] .name`);
      if (name) name.textContent = t.name || tid;
      const goal = document.querySelector(`#scoreline .goal[data-side="${side}"]`);
      if (goal) goal.textContent = t.score ?? 0;
    }
  }

  function playedCoverage() {
    const st = S.state;
    if (!st) return null;
    const vals = Object.entries(st.health.coverage || {})
      .filter(([pid]) => st.players[pid] && (st.players[pid].minutes > 0 || st.players[pid].on_pitch))
      .map(([, v]) => v);
    if (!vals.length) return null;
    return { mean: vals.reduce((a, b) => a + b, 0) / vals.length, low: vals.filter((v) => v < COVERAGE_LOW).length };
  }

  function renderFeed() {
    const h = S.state ? S.state.health : null;
    const box = $("#feed-state");
    box.dataset.state = h ? h.state : "";
    box.querySelector(".state-text").textContent = h ? (STATE_WORDS[h.state] || h.state) : "Waiting for data";
    const set = (key, text, title) => {
      const el = document.querySelector(`[data-health="${key}"]`);
      if (!el) return;
      el.textContent = text;
      if (title !== undefined) el.title = title;
      const raw = !h ? null : key.startsWith("events.") ? (h.events || {})[key.slice(7)] : h[key];
      el.dataset.value = raw == null || typeof raw === "object" ? "" : raw;
    };
    if (!h) return;
    const fast = h.rate_clock === "frames";
    set("fps_observed", h.fps_observed == null ? "–" : fmt1(h.fps_observed),
      fast ? "Counted per second of the frames' own time (a replay: the status says how fast)" : "Frames received per second");
    set("fps_nominal", h.fps_nominal ?? "–");
    const lagText = (v) => (v == null ? "–" : Math.abs(v) < 120 ? fmtSeconds(v) : "other clock");
    const lagTitle = h.lag_s != null && Math.abs(h.lag_s) >= 120
      ? `Frames are stamped ${fmtDuration(h.lag_s)} ${h.lag_s > 0 ? "behind" : "ahead of"} this server's clock (a replay, or a provider clock that is not synchronised); late delivery is judged against that offset.`
      : "Median time from a frame's timestamp to its arrival here";
    set("lag_s", lagText(h.lag_s), h.lag_note || lagTitle);
    set("lag_p95_s", lagText(h.lag_p95_s), lagTitle);
    document.querySelector('[data-health="lag_p95_s"]').parentElement.hidden = h.lag_p95_s == null || Math.abs(h.lag_p95_s) >= 120;
    const cov = playedCoverage();
    set("coverage", cov ? fmtPct(cov.mean) : "–", "Average share of frames in which each player on the pitch was seen");
    set("coverage_low", cov && cov.low ? `${cov.low} under ${Math.round(COVERAGE_LOW * 100)} %` : "");
    set("dropout", h.dropout == null ? "–" : fmtPct(h.dropout), "Share of expected player samples missing over the last few seconds");
    for (const k of ["frames", "late", "duplicates", "resent", "rejected", "jumps"]) set(k, h[k] == null ? "0" : fmtInt(h[k]));
    const hrBox = $("#feed-hr");
    const hrOn = "hr_coverage" in h || "hr_rejected" in h;
    hrBox.hidden = !hrOn;
    if (hrOn) {
      const shares = Object.values(h.hr_coverage || {}).filter((x) => typeof x === "number");
      const mean = shares.length ? shares.reduce((a, b) => a + b, 0) / shares.length : null;
      const low = shares.filter((x) => x < COVERAGE_LOW).length;
      set("hr_coverage", mean == null ? "–" : fmtPct(mean), "Average share of expected heart-rate samples received, players on the pitch");
      set("hr_coverage_low", low ? `${low} with strap gaps` : "");
      for (const k of ["hr_rejected", "hr_duplicates", "hr_late"]) set(k, h[k] == null ? "0" : fmtInt(h[k]));
    }
    renderEventFeed(h.events, set);
    const reasons = $("#feed-reasons");
    const evReasons = (h.events && h.events.reasons) || [];
    const items = [...(h.reasons || []), ...evReasons].map((r) => `<li data-code="${esc(r.code)}">${esc(reasonText(r))}</li>`).join("");
    if (reasons.innerHTML !== items) reasons.innerHTML = items;
  }

  // the CDF event stream's own health, once the match has one
  function renderEventFeed(ev, set) {
    const box = $("#feed-events");
    box.hidden = !ev;
    if (!ev) return;
    const st = $("#feed-events-state");
    st.dataset.state = ev.state;
    st.textContent = EVENT_WORDS[ev.state] || ev.state;
    set("events.events", fmtInt(ev.events));
    set("events.events_per_min", ev.events_per_min == null ? "–" : fmt1(ev.events_per_min));
    set("events.lag_s", ev.lag_s == null ? "–" : fmtSeconds(ev.lag_s), "How far the events arrive behind the tracking (median)");
    set("events.since_last_s", ev.since_last_s == null ? "–" : fmtSeconds(ev.since_last_s), "Seconds of play since the latest event");
    set("events.corrections", fmtInt(ev.corrections));
    set("events.rejected", fmtInt(ev.rejected));
  }

  function ageSeconds() {
    return S.lastMsgAt == null ? null : (performance.now() - S.lastMsgAt) / 1000;
  }

  function renderAge() {
    const el = $("#age");
    const age = ageSeconds();
    const [status] = statusNow();
    // after full time or in a break nothing new is due: an old message is not stale data
    const due = ["live", "replay", "degraded", "stalled", "offline"].includes(status);
    if (age == null || !due) { el.textContent = ""; el.dataset.stale = "false"; el.hidden = true; return; }
    const stale = age >= STALE_AFTER_S;
    el.dataset.stale = String(stale);
    el.dataset.age = String(Math.floor(age));
    el.hidden = !stale;
    el.textContent = stale ? `Data is ${Math.floor(age)} s old` : "";
  }

  // seconds without frames the server had counted when it sent its last message ("no frame for 2.3 s")
  function stalledAfter(h) {
    const r = (h.reasons || []).find((x) => x.code === "no_frames");
    const m = r && /for (\d+(?:\.\d+)?) s/.exec(r.message || "");
    return m ? +m[1] : 0;
  }

  // the server's "no frame for N s" was true when it was sent; say how long it has been now
  function reasonText(r) {
    const never = S.state && S.state.health && !S.state.health.frames;
    if (r.code !== "no_frames" || S.stalledSince == null || never) return r.message || r.code || "";
    const n = Math.floor((performance.now() - S.stalledSince) / 1000);
    return S.stallSeen ? `No new frames for ${n} s` : `No new frames for at least ${n} s`;
  }

  // a period end seen live, or (page opened in a break) frames but nobody on the pitch
  function periodOver() {
    if (S.periodEnded) return true;
    const st = S.state;
    if (!st || !st.health || !st.health.frames) return false;
    return !Object.values(st.players).some((p) => p.on_pitch);
  }

  // The match status: the server's (snapshot and status messages), else what the feed shows.
  function matchStatus() {
    if (S.matchStatus) return S.matchStatus;
    const h = S.state ? S.state.health : null;
    if (!h || !h.frames) return "not_started";
    if (h.state === "finished") return "ended";
    return periodOver() ? "break" : "live";
  }
  // while play is on (or due), "off" marks who is not on the pitch; in a break or after the end nobody is
  const PLAY_ON = new Set(["live", "not_started"]);
  const fmtSpeed = (v) => (v >= 10 ? String(Math.round(v)) : fmt1(v).replace(/\.0$/, ""));

  // ONE place says where the match and its feed stand: [kind, words]; the band below only amplifies it
  function statusNow() {
    if (S.authError) return ["offline", S.authError];
    if (!S.matchId) return S.matchesLoaded ? ["none", "No match yet"] : ["connecting", "Looking for matches…"];
    const offlineFor = S.closedAt == null ? 0 : (performance.now() - S.closedAt) / 1000;
    if (S.conn !== "open" && (S.state === null ? S.attempts > 0 : offlineFor >= OFFLINE_BANNER_S)) {
      return ["offline", S.connText || "No connection"];
    }
    if (!S.state) return ["connecting", "Connecting…"];
    const h = S.state.health || {};
    const ms = matchStatus();
    if (ms === "ended") return ["ended", "Full time · final figures"];
    if (ms === "break") return ["break", (PERIODS[S.env.period] || "Period") + " over · break"];
    if (ms === "not_started" || !h.frames) return ["waiting", "Not started · no frames yet"];
    if (h.state === "stalled") return ["stalled", "Feed stalled"];
    const replay = h.rate_clock === "frames" && h.feed_speed ? "Replay ×" + fmtSpeed(h.feed_speed) : "";
    if (h.state === "degraded") return ["degraded", (replay || "Live") + " · feed degraded"];
    return replay ? ["replay", replay] : ["live", "Live"];
  }

  function renderStatus() {
    const [kind, text] = statusNow();
    const el = $("#conn");
    el.dataset.status = kind;
    const t = $("#conn-text");
    if (t.textContent !== text) t.textContent = text;
  }

  function renderBanner() {
    const b = $("#banner");
    let kind = "none", title = "", text = "";
    const h = S.state ? S.state.health : null;
    const [status] = statusNow();
    const age = ageSeconds();
    if (status === "offline" && S.matchId) {
      kind = "offline";
      title = "No connection";
      text = S.state
        ? `Lost contact with pacewire; reconnecting. The figures shown are ${Math.floor(age || 0)} s old.`
        : "Cannot reach pacewire yet; retrying.";
    } else if (status === "stalled") {
      kind = "stalled";
      title = "Feed stalled";
      const why = cap((h.reasons || []).map(reasonText).join("; ") || "No new frames");
      text = `${why}. Figures frozen at ${fmtClock(S.env.match_time_s)}: do not read them as live.`;
    } else if (status === "degraded") {
      kind = "degraded";
      title = "Feed degraded";
      const why = cap((h.reasons || []).map((r) => r.message).join("; ") || "the feed is not complete");
      text = `${why}. Figures may be incomplete or behind.`;
    }
    if (b.dataset.state !== kind) b.dataset.changedAt = String(Date.now());
    b.dataset.state = kind;
    b.hidden = kind === "none";
    $("#banner-title").textContent = title;
    $("#banner-text").textContent = text;
  }

  function renderTeams() {
    const box = $("#teams");
    const teams = S.state ? S.state.teams : {};
    const ids = trackedTeams(teams);
    if (!ids.length) { box.innerHTML = ""; return; }
    let html = ids.map((tid) => teamCard(tid, teams[tid])).join("");
    if (oneTeam(S.state)) {
      const others = sidesOf(teams).filter((tid) => !ids.includes(tid)).map((tid) => teams[tid].name || tid);
      html += `<aside id="one-team" class="untracked-note panel" data-tracked-teams="1"><h3>One team tracked</h3>` +
        `<p>This feed tracks ${esc(teams[ids[0]].name || ids[0])} only. ${esc(others.join(", "))}: not tracked, ` +
        `so no figures and no opponent comparison.</p></aside>`;
    }
    box.dataset.tracked = String(ids.length);
    if (box.innerHTML !== html) box.innerHTML = html;
  }

  function teamCard(tid, t) {
    const o = t.outfield || {};
    const w = o.windows || {};
    const keys = ["last_5min", "last_15min"].filter((k) => k in w);
    const cols = [["cumulative", o, "Match so far"], ...keys.map((k) => [k, w[k], windowLabel(k)])];
    const rows = [
      ["distance_m", "Distance", "m", fmtInt],
      ["hsr_m", "High-speed", "m", fmtInt],
      ["sprint_m", "Sprint", "m", fmtInt],
      ["hsr_efforts", "HS runs", "", fmtInt],
      ["sprints", "Sprints", "", fmtInt],
      ["m_per_min", "m/min per player", "m/min", fmtInt],
    ];
    const side = t.side === "away" ? "away" : "home";
    const cell = (win, src, key, fmt, unit, main) => {
      const v = src ? src[key] : null;
      return `<td class="${main ? "main" : ""}" data-window="${win}" data-field="${key}" data-value="${v ?? ""}">` +
        `${v == null ? "–" : fmt(v)}${unit && main ? `<span class="unit">${unit}</span>` : ""}</td>`;
    };
    const pp = o.per_player || {};
    const phases = phaseBlock(o);
    return `<article class="team-card panel" data-team-id="${esc(tid)}" data-side="${side}">
      <header><h3><span class="team-glyph" data-side="${side}" aria-hidden="true"></span>${esc(t.name || tid)}</h3>
        <span class="side-tag">${side}</span><span class="team-score" aria-label="goals">${t.score ?? 0}</span></header>
      <p class="sub"><span data-field="players">${o.players ?? 0}</span> outfield players have played (goalkeepers left out) · ${o.minutes == null ? "–" : fmt1(o.minutes)} min of play</p>
      <table class="team-figs">
        <thead><tr><th scope="col"><span class="sr-only">Figure</span></th>${cols.map((c) => `<th scope="col">${c[2]}</th>`).join("")}</tr></thead>
        <tbody>
        ${rows.map(([key, label, unit, fmt]) => `<tr><th scope="row">${label}</th>${cols.map((c, i) => cell(c[0], c[1], key, fmt, unit, i === 0)).join("")}</tr>`).join("")}
        <tr><th scope="row">Per player</th>
          <td class="per-player" colspan="${cols.length}"><span data-window="per_player" data-field="distance_m" data-value="${pp.distance_m ?? ""}">${pp.distance_m == null ? "–" : fmtInt(pp.distance_m)} m per 90 min on the pitch</span> ·
          <span data-window="per_player" data-field="m_per_min" data-value="${pp.m_per_min ?? ""}">${pp.m_per_min == null ? "–" : fmtInt(pp.m_per_min)} m/min</span></td></tr>
        </tbody>
      </table>${phases}
    </article>`;
  }

  // a team's work rate by game phase: shown once the feed tells possession (a ball, or the event stream)
  function hasPhases(o) {
    return !!(o && o.phases && (o.in_play_s > 0 || o.sequences));
  }
  function phaseBlock(o) {
    if (!hasPhases(o)) return "";
    const cell = (ph, key, v, fmt) =>
      `<td data-window="phase:${ph}" data-field="${key}" data-value="${v ?? ""}">${v == null ? "–" : fmt(v)}</td>`;
    const rows = PHASES.map(([ph, label]) => {
      const f = o.phases[ph] || {};
      return `<tr data-phase="${ph}"><th scope="row">${label}</th>${cell(ph, "seconds", f.seconds, (v) => fmt1(v / 60))}` +
        `${cell(ph, "per_player_m_per_min", f.per_player_m_per_min, fmtInt)}${cell(ph, "hsr_m", f.hsr_m, fmtInt)}</tr>`;
    }).join("");
    const seq = o.sequences;
    const seqText = (k, label) => {
      const q = seq[k];
      return `<span data-window="sequences" data-field="${k}" data-value="${q.m_per_min ?? ""}">${label}: ${q.count} ` +
        `(${q.m_per_min == null ? "–" : fmtInt(q.m_per_min)} m/min, HSR ${q.hsr_m_per_min == null ? "–" : fmt1(q.hsr_m_per_min)} m/min)</span>`;
    };
    return `<table class="team-figs phase-figs" aria-label="By game phase">
      <thead><tr><th scope="col">By phase</th><th scope="col">min</th><th scope="col">m/min per player</th><th scope="col">HSR m</th></tr></thead>
      <tbody>${rows}</tbody></table>
      <p class="sub in-play">In play <span data-window="in_play" data-field="in_play_s" data-value="${o.in_play_s ?? ""}">${fmt1((o.in_play_s || 0) / 60)} min</span> ·
        <span data-window="in_play" data-field="m_per_min_in_play" data-value="${o.m_per_min_in_play ?? ""}">${o.m_per_min_in_play == null ? "–" : fmtInt(o.m_per_min_in_play)} m/min</span> team</p>` +
      (seq ? `<p class="sub sequences">Possessions ${seqText("shot", "with a shot")} · ${seqText("no_shot", "without")}</p>` : "");
  }

  // -- chips: team filter and window switch ------------------------------------------------------------------------
  function renderChips() {
    const st = S.state;
    if (!st) return;
    const teams = trackedTeams(st.teams);
    const teamOpts = [["both", "Both teams"], ...teams.map((tid) => [tid, st.teams[tid].name || tid])];
    if (!teamOpts.some(([v]) => v === S.team)) S.team = "both";
    fillChips($("#team-filter"), "team", teamOpts, S.team, "data-team-filter");
    $("#team-filter").hidden = teams.length < 2; // one team tracked: nothing to filter

    const keys = new Set();
    for (const p of Object.values(st.players)) for (const k of Object.keys(p.windows || {})) keys.add(k);
    const rank = (k) => { const m = /^(last|peak)_(\d+)min$/.exec(k); return m ? [m[1] === "last" ? 0 : 1, +m[2]] : null; };
    const wins = [...keys].filter((k) => rank(k)).sort((a, b) => {
      const ra = rank(a), rb = rank(b);
      return ra[0] - rb[0] || ra[1] - rb[1];
    });
    const winOpts = [["cumulative", "Match so far"], ["period", "This period"], ...wins.map((k) => [k, windowLabel(k)])];
    const phased = teams.some((tid) => hasPhases(st.teams[tid].outfield));
    const phaseOpts = PHASES.map(([ph, label]) => ["phase:" + ph, label]);
    if (!winOpts.some(([v]) => v === S.win) && !(phased && phaseOpts.some(([v]) => v === S.win))) S.win = "cumulative";
    fillChips($("#window-switch"), "window", winOpts, S.win, "data-window");
    $("#phase-switch").hidden = !phased;
    if (phased) fillChips($("#phase-switch"), "window", phaseOpts, S.win, "data-window");
  }

  function fillChips(fs, name, opts, current, attr) {
    const sig = opts.map((o) => o.join("=")).join("|");
    if (fs.dataset.sig !== sig) {
      const legend = fs.querySelector("legend").outerHTML;
      fs.innerHTML = legend + opts.map(([v, label]) =>
        `<label class="chip" ${attr}="${esc(v)}"><input type="radio" name="${name}" value="${esc(v)}"><span>${esc(label)}</span></label>`).join("");
      fs.dataset.sig = sig;
    }
    for (const input of fs.querySelectorAll("input")) input.checked = input.value === current;
  }

  // -- the player table ------------------------------------------------------------------------------------------
  function buildHead(cols) {
    const tr = $("#player-head");
    const sig = cols.map((c) => c.key).join(",") + "|" + PEAK.window_min + "|" + PEAK.min_on_pitch_min;
    if (tr.dataset.sig === sig) return;
    tr.dataset.sig = sig;
    if (S.sort.col && !cols.some((c) => c.key === S.sort.col)) S.sort = { col: null, dir: "desc" };
    tr.innerHTML = cols.map((c) => {
      const text = c.kind === "text" ? " text" : "";
      const extra = c.core ? "" : " data-extra";
      const label = c.key === "peak_pct" ? `Last ${PEAK.window_min} min` : c.label;
      const tip = c.key === "peak_pct" ? c.tip.replace(/5 min(ute)?s?/g, `${PEAK.window_min} minutes`) +
        `; shown while he is on the pitch, once he has played ${PEAK.min_on_pitch_min} minutes` : c.tip;
      const inner = `<span class="h-label">${esc(label)}</span><span class="h-unit">${esc(c.unit || "\u00a0")}</span>`;
      if (c.kind === "zones") {
        return `<th scope="col" data-col="${c.key}"${extra} class="text" title="${esc(tip)}"><span class="plain-head">${inner}</span></th>`;
      }
      return `<th scope="col" data-col="${c.key}"${extra} class="${text.trim()}" aria-sort="none">` +
        `<button type="button" class="sort" data-sort="${c.key}" title="${esc((tip || label) + ": sort")}">${inner}<span class="h-arrow" aria-hidden="true"></span></button></th>`;
    }).join("");
  }

  // first press: high first (A to Z for text), second: the other way, third: back to team and shirt order
  function sortBy(key) {
    const col = BY_KEY[key];
    const first = col.kind === "text" ? "asc" : "desc";
    if (S.sort.col !== key) S.sort = { col: key, dir: first };
    else if (S.sort.dir === first) S.sort.dir = first === "asc" ? "desc" : "asc";
    else S.sort = { col: null, dir: "desc" };
    renderTable();
  }

  function source(p, win) {
    if (win === "cumulative") return p;
    if (win === "period") return (p.periods || {})[S.env.period] || null;
    if (win.startsWith("phase:")) return (p.phases || {})[win.slice(6)] || null;
    return (p.windows || {})[win] || null;
  }
  const isWindow = (win) => win !== "cumulative" && win !== "period";

  function value(pid, p, key, win) {
    const src = source(p, win);
    switch (key) {
      case "jersey_number": return p.jersey_number;
      case "name": return p.name || pid;
      case "team": { const t = S.state.teams[p.team_id]; return t ? t.name || p.team_id : p.team_id; }
      case "speed_ms": return p.speed_ms;
      case "coverage": return win === "period" ? (src ? src.coverage : null) : p.coverage;
      case "minutes":
        if (win.startsWith("phase:")) return src ? src.seconds / 60 : null;
        return isWindow(win) ? (src && src.span_s != null ? src.span_s / 60 : null) : (src ? src.minutes : null);
      case "max_speed_ms": return isWindow(win) ? null : (src ? src.max_speed_ms : null);
      case "zones": return isWindow(win) ? null : (src ? src.zones : null);
      case "hr_bpm": case "hr_pct_max": return p[key] ?? null;
      case "acc_dec": return src && (src.accels != null || src.decels != null) ? (src.accels || 0) + (src.decels || 0) : null;
      case "peak_pct": return peakPct(p);
      case "usual_pct": return usualPct(p);
      case "hr_coverage": return win === "period" ? (src ? src.hr_coverage ?? null : null) : p.hr_coverage ?? null;
      default: return src ? src[key] ?? null : null;
    }
  }

  // the last N minutes' m/min as a share of the player's own best N minutes this match, in %: the same
  // windows the drop-off rule reads (N from its config); null until both windows exist
  function peakPct(p) {
    const w = p.windows || {};
    const last = w[`last_${PEAK.window_min}min`], peak = w[`peak_${PEAK.window_min}min`];
    // off the pitch (substituted, or a break) the last minutes are not his: the window counts time off
    // and, as for the drop-off rule, only after enough time on the pitch for his peak to be one (a player
    // just on has a "peak" window that holds time before he came on)
    if (!p.on_pitch || (p.minutes || 0) < PEAK.min_on_pitch_min) return null;
    if (!last || !peak || last.m_per_min == null || !peak.m_per_min) return null;
    return 100 * last.m_per_min / peak.m_per_min;
  }
  // the player's work rate in this block of the match against his usual for it (history), when the snapshot
  // carries one: {ratio, below} of baseline.vs_baseline.block.m_per_min
  function usualOf(p) {
    const b = p && typeof p.baseline === "object" ? p.baseline : null;
    const vs = b && b.vs_baseline && b.vs_baseline.block ? b.vs_baseline.block.m_per_min : null;
    return vs && typeof vs.ratio === "number" && isFinite(vs.ratio) ? { ...vs, matches: b.matches } : null;
  }
  function usualPct(p) {
    const u = usualOf(p);
    return u ? 100 * u.ratio : null;
  }
  function usualCell(raw, p, cls) {
    const u = usualOf(p);
    const b = p && typeof p.baseline === "object" ? p.baseline : null;
    if (!u) {
      const why = b && typeof b.matches === "number" && typeof b.required === "number" && b.matches < b.required ?
        ` title="${esc(`Not enough history: ${b.matches} of ${b.required} past matches`)}"` : "";
      return `<td class="${cls} none" data-col="usual_pct" data-value=""${why}><span class="fig"><span class="v">–</span></span></td>`;
    }
    const below = u.below === true;
    const tip = `${Math.round(raw)} % of his usual work rate for this block, over ${u.matches} past matches` +
      (below ? ": below his usual band" : ": within or above his usual band");
    return `<td class="${cls}${below ? " low" : ""}" data-col="usual_pct" data-value="${raw}" title="${esc(tip)}">` +
      `<span class="fig"><span class="v usual" data-below="${below}">${fmtInt(raw)}${below ? " ▾" : ""}</span>` +
      `${below ? '<span class="sr-only"> (below his usual band)</span>' : ""}</span></td>`;
  }

  function compare(a, b, key, dir) {
    const va = a.v[key], vb = b.v[key];
    const na = va == null || va === "", nb = vb == null || vb === "";
    if (na || nb) return na && nb ? 0 : na ? 1 : -1; // empty last, either direction
    let c = typeof va === "string" || typeof vb === "string"
      ? String(va).localeCompare(String(vb), "en", { numeric: true }) : va - vb;
    return dir === "asc" ? c : -c;
  }

  function renderTable() {
    const st = S.state;
    const body = $("#player-body");
    const table = $("#player-table");
    const cols = activeColumns();
    const heart = hasHeartRate(st);
    buildHead(cols);
    S.hideTeam = S.team !== "both" || oneTeam(st);
    table.dataset.window = S.win;
    table.dataset.team = S.team;
    table.dataset.heartRate = String(heart);
    table.classList.toggle("one-team", S.hideTeam);
    table.dataset.more = String(S.more);
    table.dataset.play = String(!!st && PLAY_ON.has(matchStatus()));
    document.querySelector(".layout").dataset.more = String(S.more);
    $("#hr-legend").hidden = !heart;
    for (const th of document.querySelectorAll("#player-head th[data-col]")) {
      const k = th.dataset.col;
      if (th.hasAttribute("aria-sort")) th.setAttribute("aria-sort", S.sort.col === k ? (S.sort.dir === "asc" ? "ascending" : "descending") : "none");
      th.hidden = k === "team" && S.hideTeam;
    }
    if (!st) { body.innerHTML = `<tr><td colspan="${cols.length}" class="text">Waiting for the first figures…</td></tr>`; return; }
    const homeFirst = (tid) => (st.teams[tid] && st.teams[tid].side === "away" ? 1 : 0);
    let rows = Object.entries(st.players)
      .filter(([, p]) => S.team === "both" || p.team_id === S.team)
      .map(([pid, p]) => {
        const v = {};
        for (const c of cols) v[c.key] = value(pid, p, c.key, S.win);
        return { pid, p, v };
      });
    rows.sort((a, b) => homeFirst(a.p.team_id) - homeFirst(b.p.team_id) || (a.p.jersey_number ?? 0) - (b.p.jersey_number ?? 0));
    if (S.sort.col) rows.sort((a, b) => compare(a, b, S.sort.col, S.sort.dir) || homeFirst(a.p.team_id) - homeFirst(b.p.team_id) || (a.p.jersey_number ?? 0) - (b.p.jersey_number ?? 0));

    const max = {};
    for (const c of cols) {
      if (!c.bar) continue;
      max[c.key] = Math.max(0, ...rows.map((r) => (typeof r.v[c.key] === "number" ? r.v[c.key] : 0)));
    }
    let zmax = 0;
    for (const r of rows) if (r.v.zones) zmax = Math.max(zmax, Object.values(r.v.zones).reduce((a, b) => a + (b || 0), 0));

    const note = $("#window-note");
    const empty = S.win !== "cumulative" && rows.length && rows.every((r) => source(r.p, S.win) === null);
    note.hidden = !empty;
    note.textContent = empty ? `${windowLabel(S.win)}: not enough play yet, so its figures show as a dash.` : "";
    // players who have not played yet: one line until they come on (or the line is opened)
    const played = (p) => (p.minutes || 0) > 0 || !!p.on_pitch;
    const used = rows.filter((r) => played(r.p));
    const unused = rows.filter((r) => !played(r.p))
      .sort((a, b) => homeFirst(a.p.team_id) - homeFirst(b.p.team_id) || (a.p.jersey_number ?? 0) - (b.p.jersey_number ?? 0));
    let html = used.map((r) => rowHtml(r, cols, max, zmax)).join("");
    html += unused.map((r) => rowHtml(r, cols, max, zmax).replace("<tr ", `<tr class="unused"${S.showUnused ? "" : " hidden"} `)).join("");
    if (unused.length) html += unusedLine(unused, cols.length);
    if (body.innerHTML !== html) body.innerHTML = html;
  }

  function unusedLine(unused, span) {
    const byTeam = {};
    for (const r of unused) byTeam[r.p.team_id] = (byTeam[r.p.team_id] || 0) + 1;
    const teams = Object.keys(byTeam);
    const words = teams.length > 1
      ? teams.map((tid) => `${(S.state.teams[tid] || {}).name || tid} ${byTeam[tid]}`).join(" · ") + " not used"
      : `${unused.length} not used`;
    return `<tr class="unused-line" data-unused="${unused.length}"><td colspan="${span}">` +
      `<button type="button" data-unused-toggle aria-expanded="${S.showUnused}">${esc(words)} · ${S.showUnused ? "hide" : "show"}</button>` +
      ` <span class="why">(no minutes yet: listed once they come on)</span></td></tr>`;
  }

  function rowHtml(r, cols, max, zmax) {
    const { pid, p, v } = r;
    const feedStalled = S.state.health && S.state.health.state === "stalled";
    const played = (p.minutes || 0) > 0 || p.on_pitch;
    const cov = v.coverage;
    const uncertain = played && cov != null && cov < COVERAGE_LOW;
    const side = S.state.teams[p.team_id] && S.state.teams[p.team_id].side === "away" ? "away" : "home";
    const covTip = uncertain ? `Seen in only ${fmtPct(cov)} of frames on the pitch (gaps, or tracking artefacts taken out): this figure is likely too low.` : "";
    // a strap that drops out is low heart-rate coverage, never a low heart rate
    const hrCov = v.hr_coverage;
    const gaps = played && hrCov != null && hrCov < COVERAGE_LOW;
    const gapTip = gaps ? `The strap sent only ${fmtPct(hrCov)} of the expected samples: heart-rate figures miss that time (missing data, not a low heart rate).` : "";
    const omitted = p.hr_omitted || {};
    const cells = cols.map((c) => {
      const td = cellHtml(c, v[c.key], p, played, uncertain, covTip, gaps, gapTip, omitted, max, zmax, side, feedStalled);
      return c.core ? td : td.replace(/^<td/, "<td data-extra");
    }).join("");
    return `<tr data-player-id="${esc(pid)}" data-team-id="${esc(p.team_id)}" data-on-pitch="${!!p.on_pitch}" data-uncertain="${uncertain}" data-hr-gaps="${gaps}">${cells}</tr>`;
  }

  function cellHtml(c, raw, p, played, uncertain, covTip, gaps, gapTip, omitted, max, zmax, side, feedStalled) {
    if (c.hr) return hrCell(c, raw, p, played, gaps, gapTip, omitted, max);
    if (c.key === "jersey_number") return `<td class="jersey" data-col="jersey_number" data-value="${raw ?? ""}">${raw ?? ""}</td>`;
    if (c.key === "name") {
      const badges = (p.is_goalkeeper ? '<span class="badge-gk" title="Goalkeeper">GK</span>' : "") +
        (p.on_pitch || !PLAY_ON.has(matchStatus()) ? "" : '<span class="badge-off" title="Not on the pitch">off</span>');
      return `<td class="pname text" data-col="name" data-value="${esc(raw)}"><span class="n">${esc(raw)}</span>${badges ? `<span class="badges">${badges}</span>` : ""}</td>`;
    }
    if (c.key === "team") {
      return `<td class="team text" data-col="team" data-value="${esc(raw)}" title="${esc(raw)}"${S.hideTeam ? " hidden" : ""}><span class="team-glyph" data-side="${side}" aria-hidden="true"></span>${esc(shortName(raw))}</td>`;
    }
    if (c.key === "zones") return zonesCell(raw, zmax);
    if (c.key === "coverage") {
      const low = played && raw != null && raw < COVERAGE_LOW;
      const text = raw == null || !played ? "–" : fmtPct(raw);
      return `<td class="cov${low ? " low" : ""}" data-col="coverage" data-value="${raw ?? ""}"${low ? ` title="${esc(covTip)}"` : ""}>` +
        `<span class="fig"><span class="v">${text}</span></span></td>`;
    }
    const none = raw == null;
    const mark = uncertain && c.key !== "speed_ms" && c.key !== "minutes" && !none;
    const frozen = c.key === "speed_ms" && !none && feedStalled;
    const cls = ["num", none ? "none" : "", mark ? "uncertain" : "", frozen ? "frozen" : ""].filter(Boolean).join(" ");
    const text = none ? "–" : c.fmt(raw);
    const bar = c.bar ? `<span class="bar" aria-hidden="true"><i style="--w:${none || !max[c.key] ? 0 : (Math.max(raw, 0) / max[c.key]).toFixed(4)}"></i></span>` : "";
    const title = mark ? ` title="${esc(covTip)}"` : frozen ? ' title="Last speed before the feed stopped, not the speed now"' : "";
    const sr = mark ? '<span class="sr-only"> (uncertain: low coverage)</span>' : "";
    if (c.key === "peak_pct") return peakCell(raw, p, cls, mark, title, sr);
    if (c.key === "usual_pct") return usualCell(raw, p, cls);
    return `<td class="${cls}" data-col="${c.key}" data-value="${none ? "" : raw}"${title}><span class="fig"><span class="v">${text}</span>${sr}${bar}</span></td>`;
  }

  // "% own peak": the number, a bar against 100 %, marked under the drop-off rule's share
  function peakCell(raw, p, cls, mark, title, sr) {
    const none = raw == null;
    const low = !none && PEAK.share != null && raw < PEAK.share * 100;
    const w = none ? 0 : Math.min(Math.max(raw, 0) / 100, 1).toFixed(4);
    const lowTip = low ? ` title="${esc(`Under ${Math.round(PEAK.share * 100)} % of his own best ${PEAK.window_min} minutes: the drop-off alert's limit`)}"` : "";
    return `<td class="${cls} peak${low ? " low" : ""}" data-col="peak_pct" data-value="${none ? "" : raw}"${title || lowTip}>` +
      `<span class="fig"><span class="v pct">${none ? "–" : fmtInt(raw)}</span>${sr}` +
      `<span class="bar" aria-hidden="true"><i style="--w:${w}"></i></span></span></td>`;
  }

  // A heart-rate cell: "—" with the reason when the profile cannot support the figure; the coverage cell
  // tagged "gaps" when the strap dropped out; "no signal" when the latest sample is stale.
  function hrCell(c, raw, p, played, gaps, gapTip, omitted, max) {
    const why = omitted[c.key];
    if (why) {
      return `<td class="num omitted" data-col="${c.key}" data-value="" data-omitted="${esc(why)}" title="${esc("Left out: " + why)}">` +
        `<span class="fig"><span class="v">\u2014</span><span class="sr-only"> (left out: ${esc(why)})</span></span></td>`;
    }
    const none = raw == null;
    if (c.key === "hr_coverage") {
      const text = none || !played ? "–" : fmtPct(raw);
      const tag = gaps ? '<span class="strap-tag" aria-hidden="true">gaps</span><span class="sr-only"> (strap gaps)</span>' : "";
      return `<td class="hrcov${gaps ? " gaps" : ""}" data-col="hr_coverage" data-value="${none ? "" : raw}"${gaps ? ` title="${esc(gapTip)}"` : ""}>` +
        `<span class="fig"><span class="v">${text}</span>${tag}</span></td>`;
    }
    // no fresh sample from a player on the pitch who has sent some: the strap is silent, not the heart
    const silent = LIVE_HR.has(c.key) && none && p.on_pitch && p.hr_peak_bpm != null;
    if (silent) {
      return `<td class="num nosignal" data-col="${c.key}" data-value="" title="No heart-rate sample for several seconds: the strap dropped out or is off (not a low heart rate)">` +
        `<span class="fig"><span class="v">no signal</span></span></td>`;
    }
    const strap = gaps && !none && !LIVE_HR.has(c.key);
    const cls = ["num", "hr", none ? "none" : "", strap ? "strap" : ""].filter(Boolean).join(" ");
    const bar = c.bar ? `<span class="bar" aria-hidden="true"><i style="--w:${none || !max[c.key] ? 0 : (Math.max(raw, 0) / max[c.key]).toFixed(4)}"></i></span>` : "";
    const sr = strap ? '<span class="sr-only"> (incomplete: strap gaps)</span>' : "";
    return `<td class="${cls}" data-col="${c.key}" data-value="${none ? "" : raw}"${strap ? ` title="${esc(gapTip)}"` : ""}>` +
      `<span class="fig"><span class="v">${none ? "–" : c.fmt(raw)}</span>${sr}${bar}</span></td>`;
  }

  function zonesCell(zones, zmax) {
    if (!zones || !zmax) return `<td class="zones text none" data-col="zones" data-value=""><span class="v">–</span></td>`;
    const names = Object.keys(zones);
    const tip = names.map((n) => `${bandLabel(n)}: ${fmtInt(zones[n] || 0)} m`).join("\n");
    const segs = names.map((n) => `<i style="width:${((zones[n] || 0) / zmax * 100).toFixed(2)}%"></i>`).join("");
    return `<td class="zones text" data-col="zones" data-value="${esc(JSON.stringify(zones))}"><span class="zbar" title="${esc(tip)}" role="img" aria-label="${esc(tip.replace(/\n/g, "; "))}">${segs}</span></td>`;
  }

  // an alert as one line: player, the rule in words, value against limit with units
  const FIG_UNITS = { minutes: "min", hsr_m: "m", sprint_m: "m", distance_m: "m", sprints: "sprints", hsr_efforts: "runs" };
  const FIG_WORDS = { minutes: "minutes", hsr_m: "high-speed m", sprint_m: "sprint m", distance_m: "distance",
    sprints: "sprints", hsr_efforts: "high-speed runs", distance: "work rate", m_per_min: "work rate", hsr: "high-speed m/min" };
  function alertWords(a, p) {
    const num = (v) => (typeof v === "number" ? (Number.isInteger(v) ? fmtInt(v) : fmt1(v)) : String(v ?? "–"));
    const fig = FIG_WORDS[a.figure] || String(a.figure || "").replace(/_/g, " ");
    if (a.kind === "drop_off_peak") {
      // the same figure as the table's "% own peak": the last window's m/min against the peak window's
      const peak = p && p.windows ? (p.windows[`peak_${PEAK.window_min}min`] || {}).m_per_min : null;
      if (!peak) return [`${fig} vs own peak`, `${num(a.value)} m/min, limit ${num(a.limit)} m/min`];
      // whole percent, or a tenth where both round alike (an alert at "65 %, limit 65 %" reads as none)
      const digits = Math.round(100 * a.value / peak) === Math.round(100 * a.limit / peak) ? 1 : 0;
      const pct = (v) => (100 * v / peak).toFixed(digits);
      return [`${fig} vs own peak`, `${pct(a.value)} % (${num(a.value)} m/min), limit ${pct(a.limit)} %`];
    }
    if (a.kind === "drop_off_baseline") return [`${fig} below usual`, `${num(a.value)} m/min, limit ${num(a.limit)} m/min`];
    if (a.kind === "load_budget") {
      const unit = FIG_UNITS[a.figure] || "";
      return [`load budget, ${fig}`, `${num(a.value)} ${unit}, limit ${num(a.limit)} ${unit}`.replace(/ +/g, " ")];
    }
    return [String(a.rule || "alert").replace(/_/g, " "), `${num(a.value)}, limit ${num(a.limit)}`];
  }

  function renderAlerts() {
    const ol = $("#alerts");
    if (!S.alerts.length) { ol.innerHTML = '<li class="empty">No alerts so far.</li>'; return; }
    const newest = [...S.alerts].sort((x, y) => (y.match_time_s ?? 0) - (x.match_time_s ?? 0));
    ol.innerHTML = newest.map((a) => {
      const pid = a.player_id || "";
      const p = S.state && pid ? S.state.players[pid] : null;
      const who = p ? `#${p.jersey_number} ${p.name || pid}` : pid;
      const [rule, figs] = alertWords(a, p);
      return `<li class="alert-item" data-rule="${esc(a.rule || "")}" data-player-id="${esc(pid)}" data-value="${esc(a.value ?? "")}" data-limit="${esc(a.limit ?? "")}" title="${esc(a.message || "")}">` +
        `<span class="when">${fmtClock(a.match_time_s)}</span><span class="what"><b>${esc(who)}</b> · ${esc(rule)} · ${esc(figs)}</span></li>`;
    }).join("");
  }

  function renderReports() {
    const ul = $("#reports");
    const ok = (u) => typeof u === "string" && !/^\s*(javascript|data|vbscript):/i.test(u);
    const safe = S.reports.filter((r) => r && ok(r.url));
    if (!safe.length) { ul.innerHTML = '<li class="empty">Half-time and full-time reports show up here.</li>'; return; }
    const words = { half_time: "Half-time report", full_time: "Full-time report" };
    const link = (u, text, cls) => `<a class="${cls}" href="${esc(apiUrl(u).href)}" target="_blank" rel="noopener">${text}</a>`;
    ul.innerHTML = safe.map((r) => `<li data-kind="${esc(r.kind || "")}">${link(r.url, esc(words[r.kind] || r.kind || "Report"), "report-main")}` +
      `${ok(r.csv) ? " " + link(r.csv, "CSV", "report-extra") : ""}${ok(r.json) ? " " + link(r.json, "JSON", "report-extra") : ""}</li>`).join("");
  }

  // -- theme ---------------------------------------------------------------------------------------------------------
  function applyTheme(t) {
    document.documentElement.setAttribute("data-theme", t);
    const btn = $("#theme-toggle");
    btn.setAttribute("aria-pressed", String(t === "dark"));
    // the button names what pressing it does
    btn.querySelector(".theme-text").textContent = t === "dark" ? "Light theme" : "Dark theme";
    btn.title = t === "dark" ? "Switch to the light theme" : "Switch to the dark theme";
  }

  function initTheme() {
    applyTheme(document.documentElement.getAttribute("data-theme") === "dark" ? "dark" : "light");
    $("#theme-toggle").addEventListener("click", () => {
      const next = document.documentElement.getAttribute("data-theme") === "dark" ? "light" : "dark";
      safeStorage("pacewire.theme", next);
      applyTheme(next);
    });
    if (window.matchMedia) {
      window.matchMedia("(prefers-color-scheme: dark)").addEventListener("change", (e) => {
        const stored = safeStorage("pacewire.theme");
        if (stored !== "light" && stored !== "dark") applyTheme(e.matches ? "dark" : "light");
      });
    }
  }

  // thresholds from the server's config (the same values the reports use); the defaults stand until then
  async function loadSettings() {
    try {
      const cfg = await getJSON("page-settings.json");
      if (typeof cfg.low_coverage === "number") COVERAGE_LOW = cfg.low_coverage;
      PEAK.share = typeof cfg.peak_share === "number" ? cfg.peak_share : null;
      if (typeof cfg.peak_window_min === "number") PEAK.window_min = cfg.peak_window_min;
      if (typeof cfg.peak_min_on_pitch_min === "number") PEAK.min_on_pitch_min = cfg.peak_min_on_pitch_min;
    } catch (e) { return; }
    $("#cov-threshold").textContent = Math.round(COVERAGE_LOW * 100);
    for (const el of document.querySelectorAll(".cov-threshold-hr")) el.textContent = Math.round(COVERAGE_LOW * 100);
    scheduleRender();
  }

  // -- wiring -----------------------------------------------------------------------------------------------------------
  function init() {
    initTheme();
    buildHead(activeColumns());
    $("#player-head").addEventListener("click", (ev) => {
      const btn = ev.target.closest("button[data-sort]");
      if (btn) sortBy(btn.dataset.sort);
    });
    $("#player-body").addEventListener("click", (ev) => {
      if (!ev.target.closest("button[data-unused-toggle]")) return;
      S.showUnused = !S.showUnused;
      renderTable();
      const again = document.querySelector("button[data-unused-toggle]");
      if (again) again.focus(); // keyboard users stay on the line they pressed
    });
    S.more = safeStorage("pacewire.more") === "true";
    $("#more-figures").checked = S.more;
    $("#more-figures").addEventListener("change", (e) => {
      S.more = e.target.checked;
      safeStorage("pacewire.more", String(S.more));
      renderTable();
    });
    loadSettings();
    $("#cov-threshold").textContent = Math.round(COVERAGE_LOW * 100);
    for (const el of document.querySelectorAll(".cov-threshold-hr")) el.textContent = Math.round(COVERAGE_LOW * 100);
    $("#match-picker").addEventListener("change", (e) => { if (e.target.value) selectMatch(e.target.value); });
    $("#match-picker").addEventListener("focus", refreshMatches); // about to choose: show what is live now
    $("#team-filter").addEventListener("change", (e) => { if (e.target.name === "team") { S.team = e.target.value; renderTable(); } });
    for (const fs of ["#window-switch", "#phase-switch"]) {
      $(fs).addEventListener("change", (e) => { if (e.target.name === "window") { S.win = e.target.value; renderChips(); renderTable(); } });
    }
    renderTable();
    refreshMatches();
    setInterval(refreshMatches, MATCHES_EVERY_MS);
    setInterval(refreshReports, REPORTS_EVERY_MS);
    setInterval(() => { renderStatus(); renderAge(); renderBanner(); renderFeed(); }, 500);
    setInterval(watchdog, 5000);
    window.addEventListener("online", () => { if (S.conn !== "open") connect(); });
  }

  // An open socket that stays silent may be a dead link the browser has not noticed: check the server.
  async function watchdog() {
    if (!ws || S.conn !== "open") return;
    const since = S.lastMsgAt == null ? (performance.now() - (S.openedAt || 0)) / 1000 : ageSeconds();
    if (since < WATCHDOG_S) return;
    try {
      const r = await fetch(apiUrl("healthz"), { cache: "no-store" });
      if (!r.ok) throw new Error("healthz " + r.status);
    } catch (e) {
      if (ws) ws.close();
    }
  }

  // for tests and for curious people at the console
  window.pacewire = {
    get state() { return S.state; },
    get seq() { return S.lastSeq; },
    get socket() { return ws; },
    get matchId() { return S.matchId; },
  };

  init();
})();
