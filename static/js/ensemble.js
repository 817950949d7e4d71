// The ensemble beside the deterministic forecast: which percentile traces
// bound the shaded range, the range as a closed SVG outline, and what the
// page says about the scenarios in words. Pure (node tests); the charts
// draw with what it returns.
//
// The API calls the ensemble's members "members"; the page calls them
// scenarios, the word a planner reads. A reach without an ensemble has no
// `run.ensemble`, and the page then says nothing about scenarios.

import { toMs } from "./format.js";
import { levelsOf, levelWords, weekdayClock } from "./status.js";

/**
 * The range's colours: a light blue fill with darker blue edges (the
 * edges, not the fill, carry the 3:1 contrast for graphics of WCAG 2.1
 * SC 1.4.11 against the white chart), the median in a dark blue. Blue
 * against the forecast's orange-red stays apart for red-green colour
 * blindness; the key also tells them by pattern (shaded, short dashes).
 */
export const BAND = { fill: "#cddcee", edge: "#3f6d9e", median: "#22466e", medianDash: "3 3" };

/** "p10", "p2.5": how a percentile is named on the page. */
export function percentileName(p) {
  return `p${Number(p)}`;
}

/** "1 scenario", "50 scenarios". */
export function scenarios(n) {
  return `${n} ${n === 1 ? "scenario" : "scenarios"}`;
}

/**
 * The traces the band is drawn from: the lowest and the highest served
 * percentile and, when served, the 50th (the median). Null with fewer
 * than two distinct percentiles: there is no range to shade.
 */
export function bandTraces(traces) {
  const ok = (traces || []).filter((t) => Number.isFinite(t?.percentile) && Array.isArray(t.stage));
  if (ok.length < 2) return null;
  const sorted = ok.slice().sort((a, b) => a.percentile - b.percentile);
  const lo = sorted[0];
  const hi = sorted[sorted.length - 1];
  if (lo.percentile === hi.percentile) return null;
  const mid = sorted.find((t) => t.percentile === 50) || null;
  return { lo, hi, mid };
}

const finite = (v) => v != null && Number.isFinite(v);

/**
 * The band between `lo` and `hi` (values at xs) as a path of closed
 * outlines on the scales x and y: along the top forwards, back along the
 * bottom. A missing value in either trace ends an outline, so a gap stays
 * a gap; a run of one sample has no area and is left out.
 */
export function bandPath(xs, lo, hi, x, y) {
  let d = "";
  let run = [];
  const close = () => {
    if (run.length >= 2) {
      const top = run.map((i, k) => `${k ? "L" : "M"}${x(xs[i]).toFixed(1)},${y(hi[i]).toFixed(1)}`);
      const bottom = run.slice().reverse().map((i) => `L${x(xs[i]).toFixed(1)},${y(lo[i]).toFixed(1)}`);
      d += `${top.join("")}${bottom.join("")}Z`;
    }
    run = [];
  };
  for (let i = 0; i < xs.length; i += 1) {
    if (finite(xs[i]) && finite(lo[i]) && finite(hi[i])) run.push(i);
    else close();
  }
  close();
  return d;
}

/** Every finite value of the band's traces, for the chart's domain. */
export function bandValues(band) {
  if (!band) return [];
  return [band.lo, band.hi].flatMap((t) => t.stage).filter(finite);
}

/**
 * What the page says about the scenarios at a point (or, with no point
 * view, for the profile): { state, text }.
 *   ready:   "p10–p90 of 50 scenarios" (and the failed ones left out);
 *   pending: "range pending: the scenarios are still being routed";
 *   failed:  "range unavailable: <the run's error>";
 *   missing: ready, but nothing to shade here.
 * Null when the run has no ensemble. `traces` are the point's (or the
 * profile's) percentile traces; `members`/`failed` the point view's
 * counts, else the brief's.
 */
export function rangeNote(brief, traces, members, failed) {
  if (!brief) return null;
  if (brief.status === "pending") return { state: "pending", text: "range pending: the scenarios are still being routed" };
  if (brief.status === "failed") return { state: "failed", text: `range unavailable: ${brief.error || "the scenarios failed"}` };
  const band = bandTraces(traces);
  if (brief.status !== "ready" || !band) return { state: "missing", text: "range unavailable: the scenarios gave no range here" };
  const n = members ?? brief.members_used ?? brief.members;
  const k = failed ?? brief.failed_members ?? 0;
  const label = `${percentileName(band.lo.percentile)}–${percentileName(band.hi.percentile)} of ${scenarios(n)}`;
  const left = k > 0 ? `; ${scenarios(k)} failed and ${k === 1 ? "is" : "are"} left out` : "";
  return { state: "ready", label, text: `${label}${left}` };
}

/**
 * One sentence on the run's scenarios for the overview, or null without
 * an ensemble: how many, in what state, and the defaults caution.
 */
export function ensembleSummary(brief) {
  if (!brief) return null;
  const caution = defaultsNote(brief);
  const tail = caution ? ` ${caution}` : "";
  if (brief.status === "pending") return `Scenarios: ${scenarios(brief.members)} still being routed; their ranges and chances appear when they are done.${tail}`;
  if (brief.status === "failed") return `Scenarios unavailable (${brief.error || "they failed"}): only the model run is shown.${tail}`;
  const used = brief.members_used ?? brief.members;
  const k = brief.failed_members ?? 0;
  const left = k > 0 ? ` (${scenarios(k)} failed and ${k === 1 ? "is" : "are"} left out)` : "";
  return `Chances below count the ${scenarios(used)} routed beside the model run${left}.${tail}`;
}

/**
 * The scenarios' crests at a point in words, or null: "scenario crests
 * p10 51.21 m to p90 51.49 m (lowest 51.16 m, highest 51.54 m)".
 */
export function crestRangeText(crest, unit) {
  const ps = (crest?.percentiles || []).filter((q) => finite(q.stage)).sort((a, b) => a.percentile - b.percentile);
  if (ps.length < 2 || !finite(crest.min) || !finite(crest.max)) return null;
  const at = (v) => `${v.toFixed(2)} ${unit}`;
  const lo = ps[0];
  const hi = ps[ps.length - 1];
  return `scenario crests ${percentileName(lo.percentile)} ${at(lo.stage)} to ${percentileName(hi.percentile)} ${at(hi.stage)} (lowest ${at(crest.min)}, highest ${at(crest.max)})`;
}

/** The caution when the scenarios' spreads are built-in defaults, or null. */
export function defaultsNote(brief) {
  if (!brief?.spreads_are_defaults) return null;
  return "The scenarios' spreads are default assumptions, not verified against this river.";
}

/** A no-break space: a number and its "%" stay on one line. */
const NBSP = "\u00a0";

/** "35 %"; "under 1 %" and "over 99 %" rather than a rounded 0 or 100. */
export function percentText(p) {
  if (!Number.isFinite(p)) return "–";
  if (p > 0 && p < 0.005) return `under 1${NBSP}%`;
  if (p < 1 && p > 0.995) return `over 99${NBSP}%`;
  return `${Math.round(p * 100)}${NBSP}%`;
}

/** "a", "a or b", "a, b or c". */
export function joinOr(items) {
  if (items.length <= 1) return items.join("");
  return `${items.slice(0, -1).join(", ")} or ${items[items.length - 1]}`;
}

/** Who reaches: "7 of 20 scenarios reach", "all 50 scenarios reach", "none of the 20 scenarios reaches". */
function reachers(k, n) {
  if (n === 1) return k ? "the only scenario reaches" : "the only scenario does not reach";
  if (k === 0) return `none of the ${n} scenarios reaches`;
  if (k === n) return `all ${n} scenarios reach`;
  return `${k} of ${scenarios(n)} ${k === 1 ? "reaches" : "reach"}`;
}

/**
 * Whether the model run reaches `level` over the span the chances count
 * (from the run's issue time `issued`): above it from now on (`exceeded`),
 * or at a sample between the issue time and now. Without that look back,
 * a level the run crossed and left again since it was issued (a page
 * seen hours later) would read "only in scenarios".
 */
export function modelReaches(point, level, issued) {
  if (level.exceeded) return true;
  const from = toMs(issued);
  if (!Number.isFinite(from)) return false;
  const stage = point.stage || [];
  return (point.times || []).some((t, k) => toMs(t) >= from && finite(stage[k]) && stage[k] >= level.elevation);
}

/**
 * A level's chance in words and numbers, seen at `now` on `zone`'s clock:
 * { text, note } or null without a chance. text: "7 of 20 scenarios reach
 * the low chord (35 %), earliest Wed 14:20, median Wed 18:15"; note,
 * when the scenarios and the model run (`reached`: it reaches the level)
 * disagree: "only in scenarios, not in the model run" or "only in the
 * model run, in none of the scenarios".
 */
export function chanceSentence(level, now, zone, reached = !!level.exceeded) {
  const c = level.chance;
  if (!c || !(c.members > 0)) return null;
  const k = c.members_reaching;
  let text = `${reachers(k, c.members)} ${levelWords(level)} (${percentText(c.probability)})`;
  const nowMs = toMs(now);
  const first = toMs(c.earliest_first_above);
  if (k > 0 && Number.isFinite(first)) {
    if (first > nowMs) {
      text += `, earliest ${weekdayClock(first, zone)}`;
      const median = toMs(c.median_first_above);
      if (k > 1 && Number.isFinite(median) && median > first) text += `, median ${weekdayClock(median, zone)}`;
    } else {
      text += `, the earliest above since ${weekdayClock(first, zone)}`;
    }
  }
  let note = null;
  if (k > 0 && !reached) note = "only in scenarios, not in the model run";
  if (k === 0 && reached) note = "only in the model run, in none of the scenarios";
  return { text, note };
}

/**
 * The overview's lines on a point's scenarios: [{ text, note, id }].
 * Pending or failed: the one range note. Ready: a sentence per level a
 * scenario or the model run (from `issued` on) reaches, then one line
 * naming the levels neither reaches. No ensemble: no lines.
 */
export function chanceLines(point, brief, now, zone, issued) {
  if (!brief) return [];
  if (brief.status === "pending") return [{ text: "scenarios pending: still being routed", note: null, id: null }];
  if (brief.status === "failed") return [{ text: `scenarios unavailable: ${brief.error || "they failed"}`, note: null, id: null }];
  const lines = [];
  const untouched = [];
  let n = null;
  for (const l of levelsOf(point)) {
    const reached = modelReaches(point, l, issued);
    const s = chanceSentence(l, now, zone, reached);
    if (!s) continue;
    n = l.chance.members;
    if (l.chance.members_reaching === 0 && !reached) untouched.push(levelWords(l));
    else lines.push({ ...s, id: l.id ?? l.name });
  }
  if (untouched.length) lines.push({ text: `${reachers(0, n)} ${joinOr(untouched)}`, note: null, id: null });
  return lines;
}

/**
 * For the glance summary: the levels some scenarios reach but the model
 * run (from `issued` on) does not, across the points, or null. "Reached
 * only in scenarios, not in the model run: the deck at Marl Bridge (5 of
 * 12)."
 */
export function onlyInScenarios(points, brief, issued) {
  if (brief?.status !== "ready") return null;
  const items = [];
  for (const p of points || []) {
    for (const l of levelsOf(p)) {
      const c = l.chance;
      if (c && c.members_reaching > 0 && !modelReaches(p, l, issued)) items.push(`${levelWords(l)} at ${p.name} (${c.members_reaching} of ${c.members})`);
    }
  }
  return items.length ? `Reached only in scenarios, not in the model run: ${items.join("; ")}.` : null;
}
