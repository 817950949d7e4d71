// When the water crosses each level, as marks on the hydrograph's level
// lines: "15:10 ↑" where it rises above, "02:10 ↓" where it falls back
// below. The mark list and label placement are pure (node tests); the
// drawing takes the document.

import { formatClock, formatTime, toMs } from "./format.js";
import { el } from "./svg.js";

/** Rough width in px of an 11 px mark label. */
const labelWidth = (text) => text.length * 6.2;
const LABEL_H = 12;

/**
 * The crossing marks of the chart's levels: for every level forecast
 * above from now on (`exceeded`), its first rise above (`first_above`,
 * dir "up") and its fall back below (`back_below`, dir "down"), when
 * inside [t0, t1]. Each: { level, value, t (ms), dir }.
 */
export function crossingMarks(levels, t0, t1) {
  const marks = [];
  for (const l of levels) {
    const src = l.source;
    if (!src || !src.exceeded) continue;
    // Above now, the rise is behind: only the fall ahead is marked.
    const keys = src.above_now ? [["back_below", "down"]] : [["first_above", "up"], ["back_below", "down"]];
    for (const [key, dir] of keys) {
      const t = toMs(src[key]);
      if (Number.isFinite(t) && t >= t0 && t <= t1) marks.push({ level: l, value: l.value, t, dir });
    }
  }
  return marks;
}

/** "15:10 ↑" or "02:10 ↓" on the zone's clock. */
export function markText(mark, zone) {
  return `${formatClock(mark.t, zone)} ${mark.dir === "up" ? "↑" : "↓"}`;
}

/** The full words for a mark's <title>. */
export function markTitle(mark, zone, unit) {
  const what = mark.dir === "up" ? "rises above" : "falls back below";
  return `${mark.level.label} (${mark.value.toFixed(2)} ${unit}): the forecast ${what} it at ${formatTime(mark.t, zone)}`;
}

function overlaps(a, b) {
  return a.x0 < b.x1 && b.x0 < a.x1 && a.y0 < b.y1 && b.y0 < a.y1;
}

/**
 * Places each mark's label next to its mark: above the line, else below,
 * else beside the dot (right, then left), else further out, so that no
 * label leaves the plot box or covers another label, another mark's dot
 * or a `blocked` box. A label with no free place is left out (its <title>
 * and the table under the chart still tell).
 * marks: [{ px, py, text }]; box: { left, right, top, bottom }.
 * Returns per mark { x, y (baseline), anchor, box } or null.
 */
export function placeMarkLabels(marks, box, blocked = []) {
  // Every mark's dot stays uncovered too (its own included: labels sit
  // just off it).
  const dots = marks.map((m) => ({ x0: m.px - 4, x1: m.px + 4, y0: m.py - 4, y1: m.py + 4 }));
  const taken = blocked.concat(dots);
  return marks.map((m) => {
    const free = labelCandidates(m, box).find((c) => c.box.x0 >= box.left && c.box.x1 <= box.right && c.box.y0 >= box.top && c.box.y1 <= box.bottom && !taken.some((t) => overlaps(t, c.box)));
    if (!free) return null;
    taken.push(free.box);
    return free;
  });
}

/** Where a mark's label may go, best first: { x, y, anchor, box }. */
function labelCandidates(m, box) {
  const w = labelWidth(m.text);
  const at = (x, y, anchor) => {
    const x0 = anchor === "start" ? x : anchor === "end" ? x - w : x - w / 2;
    return { x, y, anchor, box: { x0, x1: x0 + w, y0: y - LABEL_H + 2, y1: y + 2 } };
  };
  // Centred on the mark where that fits, else anchored inwards.
  const centre = m.px - w / 2 < box.left ? "start" : m.px + w / 2 > box.right ? "end" : "middle";
  const out = [at(m.px, m.py - 6, centre), at(m.px, m.py + LABEL_H + 6, centre), at(m.px + 7, m.py + 4, "start"), at(m.px - 7, m.py + 4, "end")];
  for (const dy of [-6 - LABEL_H, 2 * LABEL_H + 6, -6 - 2 * LABEL_H]) out.push(at(m.px, m.py + dy, centre));
  return out;
}

/**
 * Draws the marks into `parent` on scales x, y. Returns the label boxes
 * (for keeping other labels clear).
 */
export function drawCrossings(doc, parent, marks, { x, y, box, blocked, zone, unit }) {
  const g = el(doc, "g", { class: "crossings" }, parent);
  const placed = marks.map((m) => ({ px: x(m.t), py: y(m.value), text: markText(m, zone) }));
  const labels = placeMarkLabels(placed, box, blocked);
  marks.forEach((m, i) => {
    const p = placed[i];
    const id = m.level.source.id ?? m.level.label;
    const mg = el(doc, "g", { class: `crossing crossing-${m.dir}`, "data-level": id, "data-time": new Date(m.t).toISOString() }, g);
    el(doc, "title", {}, mg, markTitle(m, zone, unit));
    el(doc, "line", { x1: p.px.toFixed(1), x2: p.px.toFixed(1), y1: (p.py - 5).toFixed(1), y2: (p.py + 5).toFixed(1), stroke: "#1d2733", "stroke-width": 2 }, mg);
    el(doc, "circle", { cx: p.px.toFixed(1), cy: p.py.toFixed(1), r: 3.5, fill: m.dir === "up" ? "#1d2733" : "#ffffff", stroke: "#1d2733", "stroke-width": 1.5 }, mg);
    const l = labels[i];
    if (l) el(doc, "text", { x: l.x.toFixed(1), y: l.y.toFixed(1), "text-anchor": l.anchor, class: "crossing-label", "paint-order": "stroke", stroke: "#ffffff", "stroke-width": 3 }, mg, p.text);
  });
  return labels.filter(Boolean).map((l) => l.box);
}

/**
 * Rows for the table under a chart: each level forecast above from now
 * on, with when it rises above and falls back below, in words.
 */
export function crossingRows(levels, zone) {
  return levels
    .filter((l) => l.exceeded)
    .map((l) => ({
      id: l.id,
      name: l.kind === "low_chord" ? "low chord" : l.kind === "deck" ? "deck" : l.name,
      elevation: l.elevation,
      above: l.above_now ? "above now" : l.first_above ? formatTime(l.first_above, zone) : "–",
      below: l.back_below ? formatTime(l.back_below, zone) : "still above at the end of the forecast",
    }));
}
