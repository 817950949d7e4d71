// What a row of the overview says about one point of interest. Pure.
//
// A point's levels are its thresholds and, at a bridge, its low chord and
// deck (the API's `levels`; runs stored before levels read `thresholds`).
// Three states, each with a word, an icon and a colour (CSS class):
//   "clear"  ✓  the forecast stays below every level ahead;
//   "rising" ▲  the forecast crosses a level later;
//   "over"   ■  the stage is above a level now.
// A point with no levels says so ("–").

import { formatDuration, toMs, wallClock } from "./format.js";

const DAYS = ["Sun", "Mon", "Tue", "Wed", "Thu", "Fri", "Sat"];
const pad = (n) => String(n).padStart(2, "0");

/** The levels of a point, lowest first. */
export function levelsOf(point) {
  return (point.levels || point.thresholds || []).slice().sort((a, b) => a.elevation - b.elevation);
}

/** How a level is named in a sentence. */
export function levelWords(level) {
  if (level.kind === "low_chord") return "the low chord";
  if (level.kind === "deck") return "the deck";
  return level.name;
}

/** "Wed 14:20" on the zone's clock. */
export function weekdayClock(t, zone) {
  const w = wallClock(toMs(t), zone);
  return `${DAYS[w.weekday]} ${pad(w.hour)}:${pad(w.minute)}`;
}

/**
 * One sentence on when the water is above `level`, seen at `now`, or null
 * when it is not forecast above it: "reaches the low chord in 3 h 10 min
 * (Wed 14:20), back below Thu 02:10"; "deck under water from Wed 14:20 to
 * Thu 02:10"; "above road awash since Wed 09:10, until Wed 18:40".
 */
export function levelSentence(level, now, zone) {
  const at = (t) => weekdayClock(t, zone);
  const until = level.back_below ? at(level.back_below) : null;
  if (level.above_now) {
    const since = level.above_since
      ? level.above_since_start ? ` since before ${at(level.above_since)}` : ` since ${at(level.above_since)}`
      : "";
    const end = until ? `, until ${until}` : ", to the end of the forecast";
    if (level.kind === "deck") return `deck under water${since}${end}`;
    if (level.kind === "low_chord") return `water at the low chord${since}${end}`;
    return `above ${level.name}${since}${end}`;
  }
  if (!level.exceeded || !level.first_above) return null;
  const inWords = formatDuration((toMs(level.first_above) - toMs(now)) / 1000);
  if (level.kind === "deck") {
    return until ? `deck under water from ${at(level.first_above)} to ${until}` : `deck under water from ${at(level.first_above)} to the end of the forecast`;
  }
  const back = until ? `, back below ${until}` : ", still above at the end of the forecast";
  return `reaches ${levelWords(level)} in ${inWords} (${at(level.first_above)})${back}`;
}

const SEVERITY_RANK = { minor: 1, moderate: 2, severe: 3, extreme: 4 };

export function severityRank(s) {
  return SEVERITY_RANK[s] ?? 0;
}

/**
 * { state, icon, text, severity, next } for a point at instant `now`.
 * `next` is the earliest level crossing still ahead:
 * { name, at (ms), inSeconds } or null.
 */
export function pointStatus(point, now) {
  const nowMs = toMs(now);
  const ths = levelsOf(point);
  if (ths.length === 0) {
    return { state: "none", icon: "–", text: "no levels set", severity: null, next: null };
  }
  const over = ths.filter((t) => t.above_now);
  const ahead = ths.filter((t) => t.exceeded && !t.above_now && t.first_above && toMs(t.first_above) > nowMs);
  let next = null;
  for (const t of ahead) {
    const at = toMs(t.first_above);
    if (!next || at < next.at) next = { name: levelWords(t), at, inSeconds: Math.round((at - nowMs) / 1000) };
  }
  const topOver = over[over.length - 1];
  const topAhead = ahead[ahead.length - 1];
  if (topOver) {
    const rising = topAhead && topAhead.elevation > topOver.elevation ? `, rising to ${levelWords(topAhead)}` : "";
    const sev = topAhead && topAhead.elevation > topOver.elevation ? topAhead.severity : topOver.severity;
    return { state: "over", icon: "■", text: `${overWords(topOver)}${rising}`, severity: sev, next };
  }
  if (topAhead) {
    return { state: "rising", icon: "▲", text: `rising to ${levelWords(topAhead)}`, severity: topAhead.severity, next };
  }
  const wasOver = ths.filter((t) => t.exceeded && !t.above_now);
  if (wasOver.length) {
    return { state: "clear", icon: "✓", text: `clear (back below ${levelWords(wasOver[wasOver.length - 1])})`, severity: null, next: null };
  }
  return { state: "clear", icon: "✓", text: "clear", severity: null, next: null };
}

/**
 * Words for the clearance left under a structure level, e.g. margin 0.42 m:
 * "0.42 m below"; a negative margin is "0.30 m ABOVE" with a flag.
 * Margin is the level minus the forecast crest (positive = room left).
 */
export function clearance(margin, unit) {
  if (margin == null || !Number.isFinite(margin)) return null;
  if (margin >= 0) return { flag: false, text: `${margin.toFixed(2)} ${unit} to spare` };
  return { flag: true, text: `crest ${Math.abs(margin).toFixed(2)} ${unit} above` };
}

/** "deck under water", "water at the low chord", "over road awash". */
function overWords(level) {
  if (level.kind === "deck") return "deck under water";
  if (level.kind === "low_chord") return "water at the low chord";
  return `over ${level.name}`;
}

/** The level of a point with id `id` (or, in old runs, name), or undefined. */
export function levelWithId(point, id, name) {
  return levelsOf(point).find((t) => (t.id != null ? t.id === id : t.name === name));
}
