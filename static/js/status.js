// What a row of the overview says about one point of interest. Pure.
//
// Three states, each with a word, an icon and a colour (CSS class):
//   "clear"  ✓  the forecast stays below every threshold ahead;
//   "rising" ▲  the forecast crosses a threshold later;
//   "over"   ■  the stage is above a threshold now.
// A point with no thresholds says so ("–").

import { toMs } from "./format.js";

const SEVERITY_RANK = { minor: 1, moderate: 2, severe: 3, extreme: 4 };

export function severityRank(s) {
  return SEVERITY_RANK[s] ?? 0;
}

const byElevation = (a, b) => a.elevation - b.elevation;

/**
 * { state, icon, text, severity, next } for a point at instant `now`.
 * `next` is the earliest threshold crossing still ahead:
 * { name, at (ms), inSeconds } or null.
 */
export function pointStatus(point, now) {
  const nowMs = toMs(now);
  const ths = (point.thresholds || []).slice().sort(byElevation);
  if (ths.length === 0) {
    return { state: "none", icon: "–", text: "no thresholds set", severity: null, next: null };
  }
  const over = ths.filter((t) => t.above_now);
  const ahead = ths.filter((t) => t.exceeded && !t.above_now && t.first_above && toMs(t.first_above) > nowMs);
  let next = null;
  for (const t of ahead) {
    const at = toMs(t.first_above);
    if (!next || at < next.at) next = { name: t.name, at, inSeconds: Math.round((at - nowMs) / 1000) };
  }
  const topOver = over[over.length - 1];
  const topAhead = ahead[ahead.length - 1];
  if (topOver) {
    const rising = topAhead && topAhead.elevation > topOver.elevation ? `, rising to ${topAhead.name}` : "";
    const sev = topAhead && topAhead.elevation > topOver.elevation ? topAhead.severity : topOver.severity;
    return { state: "over", icon: "■", text: `over ${topOver.name}${rising}`, severity: sev, next };
  }
  if (topAhead) {
    return { state: "rising", icon: "▲", text: `rising to ${topAhead.name}`, severity: topAhead.severity, next };
  }
  const wasOver = ths.filter((t) => t.exceeded && !t.above_now);
  if (wasOver.length) {
    return { state: "clear", icon: "✓", text: `clear (back below ${wasOver[wasOver.length - 1].name})`, severity: null, next: null };
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

/** The threshold record named `name` on a point, or undefined. */
export function thresholdNamed(point, name) {
  return (point.thresholds || []).find((t) => t.name === name);
}
