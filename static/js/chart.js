// A small hydrograph chart: scales and ticks (pure, unit tested with
// node --test) and an inline-SVG renderer that takes the document to draw in.

import { crossingMarks, drawCrossings } from "./crossings.js";
import { BAND, bandPath, bandTraces, bandValues } from "./ensemble.js";
import { HOUR, formatClock, formatDay, formatLevel, offsetLabel, offsetMinutes, toMs, wallClock } from "./format.js";
import { el, pathOf } from "./svg.js";

/**
 * A "nice" step for covering `span` with about `target` intervals: 1, 2 or
 * 5 times a power of ten, the smallest such step giving at most `target`
 * intervals.
 */
export function niceStep(span, target = 5) {
  if (!(span > 0) || !Number.isFinite(span)) return 1;
  const raw = span / Math.max(1, target);
  const mag = 10 ** Math.floor(Math.log10(raw));
  const norm = raw / mag;
  // A tiny tolerance so 0.2/0.1 does not become 2.0000000000000004 > 2.
  const f = norm <= 1 + 1e-9 ? 1 : norm <= 2 + 1e-9 ? 2 : norm <= 5 + 1e-9 ? 5 : 10;
  return f * mag;
}

/** Decimal places needed to print multiples of `step` exactly. */
export function stepDecimals(step) {
  return Math.max(0, -Math.floor(Math.log10(step) + 1e-9));
}

/**
 * Ticks for a value axis: the domain [min, max] widened to whole steps and
 * every multiple of a 1-2-5 step in it. A flat series gets a ±0.5 domain.
 */
export function niceTicks(min, max, target = 5) {
  let lo = Math.min(min, max);
  let hi = Math.max(min, max);
  if (!Number.isFinite(lo) || !Number.isFinite(hi)) {
    lo = 0;
    hi = 1;
  }
  if (hi - lo < 1e-9) {
    lo -= 0.5;
    hi += 0.5;
  }
  const step = niceStep(hi - lo, target);
  const dec = stepDecimals(step);
  const round = (v) => Number(v.toFixed(dec));
  const start = round(Math.floor(lo / step + 1e-9) * step);
  const end = round(Math.ceil(hi / step - 1e-9) * step);
  const ticks = [];
  for (let i = 0; ; i += 1) {
    const v = round(start + i * step);
    if (v > end + step * 1e-6) break;
    ticks.push(v);
  }
  return { min: start, max: end, step, decimals: dec, ticks };
}

/** Fewest pixels a bridge's clearance (or 5 cm, if less) gets on the stage axis. */
export const MIN_GAP_PX = 6;

/**
 * Stage-axis ticks that resolve a bridge's clearance: as niceTicks(lo, hi),
 * unless that would draw the gap between the crest and the low chord (or
 * `resolution`, e.g. 5 cm, when the gap is smaller) on fewer than
 * MIN_GAP_PX of the `plotPx` pixels; then the axis is zoomed on the crest
 * and the low chord (`zoomed: true`). The chart also labels both values.
 */
export function stageTicks(lo, hi, { crest, lowChord, plotPx, resolution, target = 5 }) {
  const full = niceTicks(lo, hi, target);
  if (crest == null || lowChord == null || !Number.isFinite(crest) || !Number.isFinite(lowChord)) return full;
  const gap = Math.max(Math.abs(lowChord - crest), resolution);
  if ((gap * plotPx) / (full.max - full.min) >= MIN_GAP_PX) return full;
  // The widest span still showing `gap` on MIN_GAP_PX; a third of it
  // around the pair, because whole steps widen the domain (by less than
  // 2.25 times for target >= 4).
  const maxSpan = (plotPx * gap) / MIN_GAP_PX;
  const mid = (crest + lowChord) / 2;
  const half = Math.max(maxSpan / 6, Math.abs(lowChord - crest) / 2);
  return { ...niceTicks(mid - half, mid + half, Math.max(4, target)), zoomed: true };
}

/**
 * Anchor for a time label centred on `px` whose half width is about
 * `half`, so that it stays within [left, right]: "middle" where it fits,
 * else "start" or "end" at the tick.
 */
export function tickAnchor(px, half, left, right) {
  if (px - half < left) return "start";
  if (px + half > right) return "end";
  return "middle";
}

/** A linear map from [d0, d1] to [r0, r1]. */
export function linearScale(d0, d1, r0, r1) {
  const k = d1 === d0 ? 0 : (r1 - r0) / (d1 - d0);
  const f = (v) => r0 + (v - d0) * k;
  f.invert = (p) => (k === 0 ? d0 : d0 + (p - r0) / k);
  return f;
}

/** Hour steps tried for the time axis, smallest first. */
export const HOUR_STEPS = [1, 2, 3, 6, 12, 24, 48];

/**
 * Time ticks between t0 and t1 (epoch ms) on whole hours of `zone`'s wall
 * clock: the smallest step in HOUR_STEPS giving at most `maxTicks` ticks,
 * placed where the local hour is a multiple of the step (days at local
 * midnight). Returns { stepHours, ticks: [ms] }.
 */
export function timeTicks(t0, t1, zone, maxTicks = 8) {
  const lo = Math.min(t0, t1);
  const hi = Math.max(t0, t1);
  for (const step of HOUR_STEPS) {
    const ticks = hourTicks(lo, hi, zone, step, maxTicks + 1);
    if (ticks.length <= maxTicks || step === HOUR_STEPS[HOUR_STEPS.length - 1]) {
      return { stepHours: step, ticks };
    }
  }
  return { stepHours: 1, ticks: [] };
}

function hourTicks(lo, hi, zone, step, limit) {
  const ticks = [];
  // Walk the local wall clock hour by hour; keep hours that are multiples
  // of the step and map each back to an instant.
  const localStart = Math.floor((lo + offsetMinutes(zone, lo) * 60_000) / HOUR) * HOUR;
  const localEnd = hi + offsetMinutes(zone, hi) * 60_000;
  for (let local = localStart; local <= localEnd + HOUR; local += HOUR) {
    const hourIndex = Math.round(local / HOUR);
    const hourOfDay = ((hourIndex % 24) + 24) % 24;
    const keep = step <= 24 ? hourOfDay % step === 0 : hourOfDay === 0 && Math.round(hourIndex / 24) % (step / 24) === 0;
    if (!keep) continue;
    // Offset at the guessed instant, refined once (enough across DST).
    let t = local - offsetMinutes(zone, local) * 60_000;
    t = local - offsetMinutes(zone, t) * 60_000;
    if (t < lo || t > hi) continue;
    if (ticks.length && ticks[ticks.length - 1] === t) continue;
    ticks.push(t);
    if (ticks.length > limit) break;
  }
  return ticks;
}

/** Spreads label positions (sorted or not) so neighbours are >= gap apart. */
export function spreadLabels(ys, gap, top, bottom) {
  const order = ys.map((y, i) => [y, i]).sort((a, b) => a[0] - b[0]);
  const out = new Array(ys.length);
  let prev = -Infinity;
  for (const [y, i] of order) {
    const v = Math.max(y, prev + gap);
    out[i] = v;
    prev = v;
  }
  // If pushed past the bottom, shift the whole run back up.
  const over = Math.max(0, prev - bottom);
  if (over > 0) for (let i = 0; i < out.length; i += 1) out[i] = Math.max(top, out[i] - over);
  return out;
}

/**
 * The lines a hydrograph draws: the user's thresholds, then the low chord
 * and deck (from the point's own fields, drawn as a structure). Each
 * carries the API's level as `source` (when the answer has levels), for
 * its crossing times.
 */
export function chartLevels(point) {
  const levels = [];
  const api = point.levels || point.thresholds || [];
  for (const th of api) {
    if (!th.kind || th.kind === "threshold") levels.push({ kind: "threshold", label: th.name, value: th.elevation, severity: th.severity, source: th });
  }
  const structure = (kind, label, value) => {
    if (value != null) levels.push({ kind: "structure", label, value, source: api.find((l) => l.kind === kind) });
  };
  structure("low_chord", "low chord", point.low_chord);
  structure("deck", "deck", point.deck);
  return levels;
}

/**
 * Draws one point's hydrograph as an SVG element.
 * point: the API's point; ctx: { zone, units, now, width, titleId }.
 */
export function renderChart(doc, point, ctx) {
  const c = chartFrame(doc, point, ctx);
  drawStageAxis(c);
  drawTimeAxis(c);
  const clip = plotClip(c, ctx.titleId);
  // The scenarios' range behind the level lines and the series.
  if (c.band) drawBand(c.doc, c.svg, c.times, c.band, c.x, c.y, clip);
  // Threshold and structure lines, labelled at the right.
  const { m, width, height } = c;
  const levelBoxes = drawLevels(doc, c.svg, c.levels, { x0: m.left, x1: width - m.right, top: m.top, bottom: height - m.bottom, y: c.y, yt: c.yt, unit: c.unit });
  drawSeries(c, point, clip);
  // On top of the series: where the forecast rises above and falls back
  // below each level, clear of the level labels and the "now" label.
  const inView = c.levels.filter((l) => l.value >= c.yt.min && l.value <= c.yt.max);
  const plotBox = { left: m.left, right: width - m.right, top: m.top, bottom: height - m.bottom };
  const nowBox = Number.isFinite(c.nowMs) ? [{ x0: c.x(c.nowMs), x1: c.x(c.nowMs) + 4 + textWidth("now"), y0: m.top, y1: m.top + 13 }] : [];
  const marks = crossingMarks(inView, c.t0, c.t1);
  const blocked = levelBoxes.concat(nowBox, crestBox(c, point));
  const markBoxes = drawCrossings(doc, c.svg, marks, { x: c.x, y: c.y, box: plotBox, blocked, zone: ctx.zone, unit: c.unit });
  drawNow(c);
  drawCrest(c, point, levelBoxes.concat(markBoxes));
  return c.svg;
}

/** Size, scales, levels and the empty svg of one hydrograph. */
function chartFrame(doc, point, ctx) {
  const width = Math.max(280, Math.round(ctx.width || 720));
  const narrow = width < 520;
  const height = narrow ? 260 : 320;
  const m = { top: 14, right: narrow ? 8 : 16, bottom: 52, left: 58 };
  const unit = ctx.units.stage;
  const nowMs = toMs(ctx.now);
  const times = (point.times || []).map(toMs);
  const obs = (point.observed || []).map((o) => [toMs(o.time), o.stage]);
  const levels = chartLevels(point);
  // The scenarios' range, drawn when the point has one: its values widen
  // the stage axis so the band is not cut off.
  const band = bandTraces(point.ensemble?.stage);
  const allT = times.concat(obs.map((o) => o[0])).filter(Number.isFinite);
  if (Number.isFinite(nowMs)) allT.push(nowMs);
  const t0 = Math.min(...allT);
  const t1 = Math.max(...allT);
  const vals = (point.stage || []).concat(obs.map((o) => o[1]), levels.map((l) => l.value), bandValues(band), correctedStage(point) || []).filter((v) => v != null && Number.isFinite(v));
  // 5 cm, or the same length in feet (0.3048 m each, NIST SP 811).
  const resolution = unit === "ft" ? 0.05 / 0.3048 : 0.05;
  const plotPx = height - m.bottom - m.top;
  const yt = stageTicks(Math.min(...vals), Math.max(...vals), { crest: point.crest_stage, lowChord: point.low_chord, plotPx, resolution, target: narrow ? 4 : 6 });
  const svg = el(doc, "svg", { class: "chart", viewBox: `0 0 ${width} ${height}`, width, height, role: "img", "aria-labelledby": ctx.titleId, "data-point": point.name });
  el(doc, "title", { id: ctx.titleId }, svg, ctx.title || `Stage at ${point.name}`);
  const x = linearScale(t0, t1, m.left, width - m.right);
  const y = linearScale(yt.min, yt.max, height - m.bottom, m.top);
  return { doc, svg, width, height, m, unit, zone: ctx.zone, nowMs, times, obs, levels, band, t0, t1, yt, plotPx, x, y };
}

/** Horizontal grid and stage labels. */
function drawStageAxis({ doc, svg, m, width, height, y, yt, unit }) {
  const grid = el(doc, "g", { class: "grid" }, svg);
  for (const v of yt.ticks) {
    const py = y(v).toFixed(1);
    el(doc, "line", { x1: m.left, x2: width - m.right, y1: py, y2: py, stroke: "#d9dde2", "stroke-width": 1 }, grid);
    el(doc, "text", { x: m.left - 6, y: py, dy: "0.32em", "text-anchor": "end", class: "tick" }, grid, v.toFixed(yt.decimals));
  }
  const mid = (m.top + height - m.bottom) / 2;
  el(doc, "text", { x: 12, y: mid, transform: `rotate(-90 12 ${mid})`, "text-anchor": "middle", class: "axis-title" }, svg, yt.zoomed ? `Stage (${unit}), zoomed` : `Stage (${unit})`);
}

/** Time axis: ticks on whole hours of the reach's clock, days under them. */
function drawTimeAxis({ doc, svg, m, width, height, x, t0, t1, zone, nowMs }) {
  const maxTicks = Math.max(2, Math.floor((width - m.left - m.right) / 64));
  const tt = timeTicks(t0, t1, zone, maxTicks);
  const axis = el(doc, "g", { class: "x-axis" }, svg);
  let lastDay = "";
  for (const t of tt.ticks) {
    const px = x(t).toFixed(1);
    el(doc, "line", { x1: px, x2: px, y1: m.top, y2: height - m.bottom, stroke: "#eceef1", "stroke-width": 1 }, axis);
    el(doc, "line", { x1: px, x2: px, y1: height - m.bottom, y2: height - m.bottom + 5, stroke: "#4d5b6a" }, axis);
    const day = formatDay(t, zone);
    const newDay = day !== lastDay;
    // Half the wider of the two lines, with room for bold digits.
    const half = 0.6 * textWidth(newDay ? day : "00:00");
    const anchor = tickAnchor(Number(px), half, 0, width);
    const label = el(doc, "text", { x: px, y: height - m.bottom + 17, "text-anchor": anchor, class: "tick" }, axis, formatClock(t, zone));
    if (newDay) {
      const w = wallClock(t, zone);
      const tspan = el(doc, "tspan", { x: px, dy: "1.2em" }, label, tt.stepHours >= 24 || w.hour === 0 || !lastDay ? day : "");
      tspan.setAttribute("class", "tick-day");
      lastDay = day;
    }
  }
  el(doc, "line", { x1: m.left, x2: width - m.right, y1: height - m.bottom, y2: height - m.bottom, stroke: "#4d5b6a" }, axis);
  el(doc, "text", { x: width - m.right, y: height - 4, "text-anchor": "end", class: "axis-title" }, axis, `Time (${zoneLabel(zone, nowMs)})`);
}

/**
 * On a zoomed axis, the attributes that cut a series off at the plot's
 * edges (and the clip path they name); else none.
 */
function plotClip({ doc, svg, m, width, plotPx, yt }, titleId) {
  if (!yt.zoomed) return {};
  el(doc, "rect", { x: m.left, y: m.top, width: width - m.left - m.right, height: plotPx }, el(doc, "clipPath", { id: `clip-${titleId}` }, svg));
  return { "clip-path": `url(#clip-${titleId})` };
}

/** The corrected stage when the correction is in use at the point, else null. */
export function correctedStage(point) {
  const c = point.corrected;
  return c && c.on && Array.isArray(c.stage) ? c.stage : null;
}

/**
 * Series: model stage dashed, the corrected stage (when in use) dotted,
 * observed solid on top of both.
 */
function drawSeries({ doc, svg, x, y, times, obs }, point, clip) {
  const fcPath = pathOf(times, point.stage || [], x, y);
  if (fcPath) el(doc, "path", { d: fcPath, fill: "none", stroke: "#b03a12", "stroke-width": 2.5, "stroke-dasharray": "8 5", class: "series-forecast", ...clip }, svg);
  const corrected = correctedStage(point);
  const cPath = corrected && pathOf(times, corrected, x, y);
  if (cPath) el(doc, "path", { d: cPath, fill: "none", stroke: "#1f4a1a", "stroke-width": 2, "stroke-dasharray": "2 3", class: "series-corrected", ...clip }, svg);
  const obsPath = pathOf(obs.map((o) => o[0]), obs.map((o) => o[1]), x, y);
  if (obsPath) el(doc, "path", { d: obsPath, fill: "none", stroke: "#1d2733", "stroke-width": 2.5, class: "series-observed", ...clip }, svg);
}

/**
 * The range between the lowest and highest percentile: a light fill with
 * an edge along each bound, and the median as short dashes. Each part
 * carries its percentile for the browser tests and a <title> for a
 * pointer.
 */
export function drawBand(doc, svg, times, band, x, y, clip = {}) {
  const g = el(doc, "g", { class: "ensemble", "data-lo": band.lo.percentile, "data-hi": band.hi.percentile, ...clip }, svg);
  const d = bandPath(times, band.lo.stage, band.hi.stage, x, y);
  if (d) el(doc, "path", { d, fill: BAND.fill, stroke: "none", class: "ensemble-band" }, g);
  for (const t of [band.lo, band.hi]) {
    const edge = pathOf(times, t.stage, x, y);
    if (edge) el(doc, "path", { d: edge, fill: "none", stroke: BAND.edge, "stroke-width": 1, class: "ensemble-edge", "data-percentile": t.percentile }, g);
  }
  const mid = band.mid && pathOf(times, band.mid.stage, x, y);
  if (mid) el(doc, "path", { d: mid, fill: "none", stroke: BAND.median, "stroke-width": 1.75, "stroke-dasharray": BAND.medianDash, class: "ensemble-median", "data-percentile": band.mid.percentile }, g);
  return g;
}

/** The crest marker's box (drawn last), for keeping labels off it. */
function crestBox({ x, y }, point) {
  const ct = toMs(point.crest_time);
  if (!Number.isFinite(ct) || point.crest_stage == null) return [];
  const cx = x(ct);
  const cy = y(point.crest_stage);
  return [{ x0: cx - 7, x1: cx + 7, y0: cy - 8, y1: cy + 8 }];
}

function drawNow({ doc, svg, m, height, x, nowMs }) {
  if (!Number.isFinite(nowMs)) return;
  const px = x(nowMs).toFixed(1);
  el(doc, "line", { x1: px, x2: px, y1: m.top, y2: height - m.bottom, stroke: "#1f4f8a", "stroke-width": 2, class: "now-line" }, svg);
  el(doc, "text", { x: Number(px) + 4, y: m.top + 10, class: "now-label" }, svg, "now");
}

/**
 * The crest marker and its label: above the marker unless that hits a
 * label in `labelBoxes` or a level line; then below it, or further out.
 * With no free place the label is left out: the text above the chart
 * states the crest.
 */
function drawCrest({ doc, svg, m, width, height, x, y, unit, levels }, point, labelBoxes) {
  const ct = toMs(point.crest_time);
  if (!Number.isFinite(ct) || point.crest_stage == null) return;
  const cx = x(ct);
  const cy = y(point.crest_stage);
  el(doc, "path", { d: `M${cx.toFixed(1)},${(cy - 7).toFixed(1)}l6,7l-6,7l-6,-7z`, fill: "#b03a12", stroke: "#ffffff", "stroke-width": 1.5, class: "crest" }, svg);
  const text = `crest ${formatLevel(point.crest_stage, unit)}`;
  const w = textWidth(text);
  const right = cx > width - m.right - w - 12;
  const x0 = right ? cx - 9 - w : cx + 9;
  const lines = levels.map((l) => ({ x0: m.left, x1: width - m.right, y0: y(l.value) - 2, y1: y(l.value) + 2 }));
  const blocked = labelBoxes.concat(lines);
  const candidates = [cy - 9, cy + 20, cy - 22, cy + 33, cy - 35, cy + 46];
  const fits = (ly) => ly - 11 > m.top && ly < height - m.bottom && !blocked.some((b) => overlaps(b, { x0, x1: x0 + w, y0: ly - 11, y1: ly + 3 }));
  const ly = candidates.find(fits);
  if (ly !== undefined) el(doc, "text", { x: (right ? cx - 9 : cx + 9).toFixed(1), y: ly.toFixed(1), "text-anchor": right ? "end" : "start", class: "crest-label", "paint-order": "stroke", stroke: "#ffffff", "stroke-width": 3 }, svg, text);
}

/**
 * Draws each level as a line labelled with its value at the right; a level
 * beyond a zoomed axis gets only its label, pinned to that edge with an
 * arrow. Returns the label boxes, for keeping the crest label clear.
 */
function drawLevels(doc, svg, levels, { x0, x1, top, bottom, y, yt, unit }) {
  const lv = el(doc, "g", { class: "levels" }, svg);
  const at = (v) => Math.min(Math.max(v, yt.min), yt.max);
  const labelYs = spreadLabels(levels.map((l) => y(at(l.value)) - 4), 12, top + 10, bottom - 2);
  const boxes = [];
  levels.forEach((l, i) => {
    const arrow = l.value < yt.min ? "↓ " : l.value > yt.max ? "↑ " : "";
    const text = `${arrow}${l.label} ${formatLevel(l.value, unit)}`;
    const right = x1 - 4;
    boxes.push({ x0: right - textWidth(text), x1: right, y0: labelYs[i] - 11, y1: labelYs[i] + 3 });
    if (!arrow) {
      const py = y(l.value).toFixed(1);
      const colour = l.kind === "structure" ? "#4d5b6a" : "#8a5a00";
      el(doc, "line", { x1: x0, x2: x1, y1: py, y2: py, stroke: colour, "stroke-width": l.kind === "structure" ? 2 : 1.25, class: `level level-${l.kind}` }, lv);
    }
    el(doc, "text", { x: right, y: labelYs[i].toFixed(1), "text-anchor": "end", class: "level-label", "paint-order": "stroke", stroke: "#ffffff", "stroke-width": 3 }, lv, text);
  });
  return boxes;
}

/** Rough width in px of a 12 px label, for placing labels apart. */
export function textWidth(text) {
  return text.length * 6.6;
}

function overlaps(a, b) {
  return a.x0 < b.x1 && b.x0 < a.x1 && a.y0 < b.y1 && b.y0 < a.y1;
}

/** "+01:00", or "Europe/Dublin, +01:00" for a named zone. */
export function zoneLabel(zone, at) {
  const off = offsetLabel(offsetMinutes(zone, Number.isFinite(at) ? at : Date.now()));
  if (!zone || /^[+-]\d{2}:?\d{2}$/.test(zone) || zone === "UTC" || zone === "Z") return off === "+00:00" && zone ? `UTC ${off}` : off;
  return `${zone}, ${off}`;
}
