// The longitudinal profile of the reach, upstream to downstream: the bed,
// the bank tops, the water surface now, the envelope of the highest
// forecast water surface with the scenarios' range of it shaded behind,
// and the points of interest with their levels.
// Scales and geometry are pure (node tests); the renderer takes the
// document to draw in.

import { drawBand, linearScale, niceTicks, spreadLabels } from "./chart.js";
import { bandTraces, bandValues } from "./ensemble.js";
import { FT_PER_MILE, formatChainage, formatLevel } from "./format.js";
import { el, pathOf } from "./svg.js";

/** Half the drawn width of a bridge, in px: a structure is short on a reach. */
export const BRIDGE_HALF_PX = 5;

/** The length one chainage-axis unit stands for: a km, or a mile in feet. */
export function chainageUnit(unit) {
  return unit === "ft" ? FT_PER_MILE : 1000;
}

/** Every elevation the profile draws, for the vertical domain. */
export function profileElevations(data) {
  const out = [];
  for (const n of data.nodes || []) out.push(n.bed, n.stage_now, n.highest);
  out.push(...bandValues(bandTraces(data.highest_percentiles)));
  for (const b of data.banks || []) out.push(b.left_top, b.right_top);
  for (const p of data.points || []) {
    out.push(p.low_chord, p.deck, p.highest, p.stage_now);
    for (const l of p.levels || []) out.push(l.elevation);
  }
  return out.filter((v) => v != null && Number.isFinite(v));
}

/**
 * Scales and ticks for a profile drawn `width` x `height` with margins m:
 * x from the first to the last node's chainage (ticks on whole 1-2-5
 * steps of km or miles, in the answer's own length unit), y over every
 * drawn elevation.
 */
export function profileLayout(data, { width, height, m, unit }) {
  const cs = (data.nodes || []).map((n) => n.chainage).filter(Number.isFinite);
  const c0 = Math.min(...cs);
  const c1 = Math.max(...cs);
  const per = chainageUnit(unit);
  const along = niceTicks(c0 / per, c1 / per, Math.max(2, Math.floor((width - m.left - m.right) / 90)));
  const xTicks = along.ticks.map((t) => t * per).filter((c) => c >= c0 - 1e-6 && c <= c1 + 1e-6);
  const zs = profileElevations(data);
  const yt = niceTicks(Math.min(...zs), Math.max(...zs), height < 280 ? 4 : 6);
  return {
    x: linearScale(c0, c1, m.left, width - m.right),
    y: linearScale(yt.min, yt.max, height - m.bottom, m.top),
    xTicks,
    yt,
  };
}

/** The bed as a closed path down to the plot's bottom edge, for a fill. */
export function bedArea(nodes, x, y, bottom) {
  const line = pathOf(nodes.map((n) => n.chainage), nodes.map((n) => n.bed), x, y);
  if (!line || nodes.length < 2) return "";
  const first = x(nodes[0].chainage).toFixed(1);
  const last = x(nodes[nodes.length - 1].chainage).toFixed(1);
  return `${line}L${last},${bottom.toFixed(1)}L${first},${bottom.toFixed(1)}Z`;
}

/** The box of a bridge from its low chord up to its deck, or null. */
export function bridgeBox(point, x, y) {
  if (point.low_chord == null || point.deck == null) return null;
  const top = y(point.deck);
  const bottom = y(point.low_chord);
  return { x: x(point.chainage) - BRIDGE_HALF_PX, y: top, width: 2 * BRIDGE_HALF_PX, height: bottom - top };
}

/** Room under the low chord at the highest forecast (negative: water above it). */
export function roomUnderLowChord(point) {
  if (point.low_chord == null || point.highest == null) return null;
  return point.low_chord - point.highest;
}

/** A value along a polyline (xs ascending) at `at`, linear between samples. */
export function valueAt(xs, ys, at) {
  for (let i = 1; i < xs.length; i += 1) {
    if (at <= xs[i] && at >= xs[i - 1]) {
      const w = xs[i] === xs[i - 1] ? 0 : (at - xs[i - 1]) / (xs[i] - xs[i - 1]);
      return ys[i - 1] + (ys[i] - ys[i - 1]) * w;
    }
  }
  return null;
}

/**
 * The scenarios' highest water surface at `chainage`, from the lowest to
 * the highest percentile along the nodes: "51.21–51.49", or "–".
 */
export function rangeAt(data, chainage) {
  const band = bandTraces(data.highest_percentiles);
  if (!band) return "–";
  const cs = (data.nodes || []).map((n) => n.chainage);
  const lo = valueAt(cs, band.lo.stage, chainage);
  const hi = valueAt(cs, band.hi.stage, chainage);
  return Number.isFinite(lo) && Number.isFinite(hi) ? `${lo.toFixed(2)}–${hi.toFixed(2)}` : "–";
}

/**
 * The table under the profile, one row per point, as strings:
 * { name, chainage, bed, now, highest, range, lowChord, deck, room }.
 */
export function profileRows(data, unit) {
  const num = (v) => (v == null || !Number.isFinite(v) ? "–" : v.toFixed(2));
  return (data.points || []).map((p) => {
    const room = roomUnderLowChord(p);
    const roomText = room == null ? "–" : room >= 0 ? `${room.toFixed(2)} ${unit} below` : `water ${(-room).toFixed(2)} ${unit} above`;
    return { id: p.id, name: p.name, chainage: formatChainage(p.chainage, unit), bed: num(p.bed), now: num(p.stage_now), highest: num(p.highest), range: rangeAt(data, p.chainage), lowChord: num(p.low_chord), deck: num(p.deck), room: roomText };
  });
}

/**
 * Draws the profile as an SVG element.
 * data: the profile answer; ctx: { width, titleId, title }.
 */
export function renderProfile(doc, data, ctx) {
  const width = Math.max(280, Math.round(ctx.width || 720));
  const height = width < 520 ? 260 : 320;
  const m = { top: 14, right: width < 520 ? 10 : 18, bottom: 40, left: 58 };
  const unit = data.units.elevation;
  const L = { ...profileLayout(data, { width, height, m, unit }), m, width, height, unit };
  const svg = el(doc, "svg", { class: "profile-chart", viewBox: `0 0 ${width} ${height}`, width, height, role: "img", "aria-labelledby": ctx.titleId });
  el(doc, "title", { id: ctx.titleId }, svg, ctx.title || `Longitudinal profile of ${data.reach_name}`);
  drawAxes(doc, svg, L);
  drawTerrain(doc, svg, data, L);
  // The scenarios' highest water surface, behind the model run's lines.
  const band = bandTraces(data.highest_percentiles);
  if (band) drawBand(doc, svg, (data.nodes || []).map((n) => n.chainage), band, L.x, L.y);
  drawWater(doc, svg, data.nodes, L);
  drawPoints(doc, svg, data.points || [], L);
  return svg;
}

function drawAxes(doc, svg, { x, y, xTicks, yt, m, width, height, unit }) {
  const g = el(doc, "g", { class: "grid" }, svg);
  for (const v of yt.ticks) {
    const py = y(v).toFixed(1);
    el(doc, "line", { x1: m.left, x2: width - m.right, y1: py, y2: py, stroke: "#d9dde2", "stroke-width": 1 }, g);
    el(doc, "text", { x: m.left - 6, y: py, dy: "0.32em", "text-anchor": "end", class: "tick" }, g, v.toFixed(yt.decimals));
  }
  const mid = (m.top + height - m.bottom) / 2;
  el(doc, "text", { x: 12, y: mid, transform: `rotate(-90 12 ${mid})`, "text-anchor": "middle", class: "axis-title" }, svg, `Elevation (${unit})`);
  const axis = el(doc, "g", { class: "x-axis" }, svg);
  xTicks.forEach((c, i) => {
    const px = x(c).toFixed(1);
    el(doc, "line", { x1: px, x2: px, y1: height - m.bottom, y2: height - m.bottom + 5, stroke: "#4d5b6a" }, axis);
    const anchor = i === 0 && Number(px) - 20 < 0 ? "start" : Number(px) + 20 > width ? "end" : "middle";
    el(doc, "text", { x: px, y: height - m.bottom + 17, "text-anchor": anchor, class: "tick" }, axis, formatChainage(c, unit));
  });
  el(doc, "line", { x1: m.left, x2: width - m.right, y1: height - m.bottom, y2: height - m.bottom, stroke: "#4d5b6a" }, axis);
  el(doc, "text", { x: width - m.right, y: height - 4, "text-anchor": "end", class: "axis-title" }, axis, "Chainage, upstream → downstream");
}

function drawTerrain(doc, svg, data, { x, y, height, m }) {
  const nodes = data.nodes || [];
  const bed = bedArea(nodes, x, y, height - m.bottom);
  if (bed) el(doc, "path", { d: bed, fill: "#d8ccb4", stroke: "#6b5b40", "stroke-width": 1.5, class: "bed" }, svg);
  const banks = data.banks || [];
  const cs = banks.map((b) => b.chainage);
  const left = pathOf(cs, banks.map((b) => b.left_top), x, y);
  const right = pathOf(cs, banks.map((b) => b.right_top), x, y);
  if (left) el(doc, "path", { d: left, fill: "none", stroke: "#4d5b6a", "stroke-width": 1.5, "stroke-dasharray": "6 3", class: "bank bank-left" }, svg);
  if (right) el(doc, "path", { d: right, fill: "none", stroke: "#4d5b6a", "stroke-width": 1.5, "stroke-dasharray": "2 3", class: "bank bank-right" }, svg);
}

function drawWater(doc, svg, nodes, { x, y }) {
  const cs = nodes.map((n) => n.chainage);
  const now = pathOf(cs, nodes.map((n) => n.stage_now), x, y);
  const high = pathOf(cs, nodes.map((n) => n.highest), x, y);
  if (now) el(doc, "path", { d: now, fill: "none", stroke: "#1f4f8a", "stroke-width": 2, class: "water-now" }, svg);
  if (high) el(doc, "path", { d: high, fill: "none", stroke: "#b03a12", "stroke-width": 2.5, "stroke-dasharray": "8 5", class: "envelope" }, svg);
}

function drawPoints(doc, svg, points, L) {
  const { x, m, height, width } = L;
  // Names read upwards just right of their marker (a rotated glyph's
  // height lies left of its baseline), spread so neighbours do not touch.
  const xs = spreadLabels(points.map((p) => x(p.chainage) + 12), 13, m.left + 12, width - 2);
  points.forEach((p, i) => {
    const g = el(doc, "g", { class: `poi poi-${p.kind}`, "data-point": p.name }, svg);
    const px = x(p.chainage).toFixed(1);
    el(doc, "line", { x1: px, x2: px, y1: m.top, y2: height - m.bottom, stroke: "#6b7785", "stroke-width": 1, "stroke-dasharray": "1 3" }, g);
    const lx = xs[i].toFixed(1);
    const ly = m.top + 2;
    el(doc, "text", { x: lx, y: ly, transform: `rotate(-90 ${lx} ${ly})`, "text-anchor": "end", class: "poi-label", "paint-order": "stroke", stroke: "#ffffff", "stroke-width": 3 }, g, p.name);
    drawStructure(doc, g, p, L);
    for (const l of (p.levels || []).filter((v) => v.kind === "threshold")) {
      const py = L.y(l.elevation).toFixed(1);
      const tick = el(doc, "line", { x1: (Number(px) - 7).toFixed(1), x2: (Number(px) + 7).toFixed(1), y1: py, y2: py, stroke: "#8a5a00", "stroke-width": 2, class: "threshold-tick" }, g);
      el(doc, "title", {}, tick, `${p.name}: ${l.name} ${formatLevel(l.elevation, L.unit)}`);
    }
  });
}

function drawStructure(doc, g, p, { x, y, unit }) {
  const b = bridgeBox(p, x, y);
  if (!b) return;
  const rect = el(doc, "rect", { x: b.x.toFixed(1), y: b.y.toFixed(1), width: b.width, height: Math.max(1, b.height).toFixed(1), fill: "#9aa5b1", stroke: "#1d2733", "stroke-width": 1, class: "bridge" }, g);
  el(doc, "title", {}, rect, `${p.name}: low chord ${formatLevel(p.low_chord, unit)}, deck ${formatLevel(p.deck, unit)}`);
  const ly = y(p.low_chord).toFixed(1);
  el(doc, "line", { x1: (b.x - 3).toFixed(1), x2: (b.x + b.width + 3).toFixed(1), y1: ly, y2: ly, stroke: "#1d2733", "stroke-width": 2, class: "low-chord" }, g);
}
