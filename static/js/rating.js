// A gauge's rating on the dashboard: pure functions of GET
// /api/gauges/{gauge}/ratings and .../gaugings. Evaluation mirrors
// src/engine/rating.rs so the page and the forecasts agree.

import { niceTicks } from "./chart.js";
import { el, pathOf } from "./svg.js";

// Q (m³/s) at `stage` (m), null where there is none. Power: the first
// segment with upper_stage ≥ stage, c (h − e)^b, 0 at or below e. Table:
// linear, null outside (the engine does not extrapolate).
export function dischargeAt(curve, stage) {
  if (!curve || !Number.isFinite(stage)) return null;
  if (curve.kind === "power") {
    const segs = curve.segments || [];
    const s = segs.find((x) => x.upper_stage == null || stage <= x.upper_stage);
    if (!s) return null;
    return stage > s.e ? s.c * (stage - s.e) ** s.b : 0;
  }
  if (curve.kind === "table") {
    const pts = curve.points || [];
    if (pts.length < 2 || stage < pts[0][0] || stage > pts[pts.length - 1][0]) return null;
    // The first point at or above the stage, as the engine's partition_point.
    let j = pts.findIndex((p) => p[0] >= stage);
    j = Math.min(Math.max(j, 1), pts.length - 1);
    const [a, b] = [pts[j - 1], pts[j]];
    const t = (stage - a[0]) / (b[0] - a[0]);
    return a[1] + t * (b[1] - a[1]);
  }
  return null;
}

// { curve, version } in force at `t` (ms): the newest version valid from
// t or earlier, else the gauge's own (version null); null without any.
export function curveAt(ratings, t) {
  const versions = (ratings?.versions || []).filter((v) => Date.parse(v.valid_from) <= t);
  const newest = versions.reduce((a, v) => (a && Date.parse(a.valid_from) > Date.parse(v.valid_from) ? a : v), null);
  if (newest) return { curve: newest.curve, version: newest.version };
  return ratings?.base ? { curve: ratings.base, version: null } : null;
}

/** Whether the gauge has any rating (its own curve or a version). */
export function hasRating(ratings) {
  return Boolean(ratings && (ratings.base || (ratings.versions || []).length));
}

/** The shifts in force at `t` (ms): from ≤ t < to. */
export function shiftsInForce(ratings, t) {
  return (ratings?.shifts || []).filter((s) => Date.parse(s.from) <= t && (s.to == null || t < Date.parse(s.to)));
}

/** The sum of the shifts in force at `t` (ms), in m. */
export const shiftAt = (ratings, t) => shiftsInForce(ratings, t).reduce((sum, s) => sum + s.offset_m, 0);

// Each gauging with deviation_pct = 100 (Q_measured / Q_rated − 1), rated
// with the curve and shifts in force at its time (as the engine converts a
// stage read then); null where the curve gives no positive discharge.
export function deviations(ratings, gaugings) {
  return (gaugings || []).map((g) => {
    const t = Date.parse(g.time);
    const c = curveAt(ratings, t);
    const q = c ? dischargeAt(c.curve, g.stage_m + shiftAt(ratings, t)) : null;
    const deviation_pct = q != null && q > 0 ? 100 * (g.discharge_m3s / q - 1) : null;
    return { ...g, deviation_pct };
  });
}

/** Root mean square of the deviations that exist (per cent), or null. */
export function rmsDeviation(devs) {
  const d = (devs || []).map((g) => g.deviation_pct).filter((v) => v != null && Number.isFinite(v));
  if (!d.length) return null;
  return Math.sqrt(d.reduce((s, v) => s + v * v, 0) / d.length);
}

// The band along `stages`, curve × (1 ± RMS / 100): { rms_pct, low, high },
// or null without a deviation to widen it by.
export function band(curve, stages, rmsPct) {
  if (rmsPct == null || !Number.isFinite(rmsPct)) return null;
  const f = rmsPct / 100;
  const q = stages.map((h) => dischargeAt(curve, h));
  return {
    rms_pct: rmsPct,
    low: q.map((v) => (v == null ? null : Math.max(0, v * (1 - f)))),
    high: q.map((v) => (v == null ? null : v * (1 + f))),
  };
}

// Stages to draw over: the curve's range (from zero flow, or the table)
// widened to every gauging, in `n` steps.
export function stageRange(curve, gaugings, n = 80) {
  const hs = (gaugings || []).map((g) => g.stage_m).filter(Number.isFinite);
  let lo;
  let hi;
  if (curve.kind === "table") {
    const pts = curve.points || [];
    lo = pts[0][0];
    hi = pts[pts.length - 1][0];
  } else {
    lo = curve.segments[0].e;
    const tops = curve.segments.map((s) => s.upper_stage).filter((u) => u != null);
    hi = Math.max(lo + 1, ...tops.map((u) => u + 0.5), ...hs);
  }
  lo = Math.min(lo, ...hs);
  hi = Math.max(hi, ...hs);
  if (curve.kind !== "table") hi += 0.1 * (hi - lo);
  return Array.from({ length: n + 1 }, (_, i) => lo + ((hi - lo) * i) / n);
}

// A marker per gauging quality, around (0, 0): shape, not colour alone.
export const MARKS = {
  excellent: "M-4,0A4,4 0 1 0 4,0A4,4 0 1 0 -4,0Z",
  good: "M-4,-4H4V4H-4Z",
  fair: "M0,-5L4,4H-4Z",
  poor: "M-4,-4L4,4M4,-4L-4,4",
};

// The chart: discharge on x, stage on y (as ratings are usually drawn;
// common practice); the curve in force at `now` (ms), its band shaded, the
// gaugings shaped by quality.
export function ratingChart(doc, { name, ratings, gaugings, now, titleId }) {
  const inForce = curveAt(ratings, now);
  const W = 560;
  const H = 320;
  const m = { l: 56, r: 16, t: 16, b: 44 };
  const svg = el(doc, "svg", { viewBox: `0 0 ${W} ${H}`, class: "rating-chart", role: "img", "aria-labelledby": titleId });
  const devs = deviations(ratings, gaugings);
  const rms = rmsDeviation(devs);
  const which = inForce?.version == null ? "the gauge's own curve" : `version ${inForce.version}`;
  el(doc, "title", { id: titleId }, svg,
    `Rating at ${name}: stage (m) against discharge (m³/s); ${which} in force now, ${devs.length} gaugings${rms == null ? "" : `, band ± ${rms.toFixed(1)} % (RMS deviation)`}.`);
  if (!inForce) return svg;
  const stages = stageRange(inForce.curve, gaugings);
  const q = stages.map((h) => dischargeAt(inForce.curve, h));
  const b = band(inForce.curve, stages, rms);
  const qs = [...q, ...(b ? b.high : []), ...devs.map((g) => g.discharge_m3s)].filter((v) => v != null && Number.isFinite(v));
  const qa = niceTicks(0, Math.max(1, ...qs));
  const ha = niceTicks(stages[0], stages[stages.length - 1]);
  const x = (v) => m.l + ((W - m.l - m.r) * v) / qa.max;
  const y = (v) => H - m.b - ((H - m.t - m.b) * (v - ha.min)) / (ha.max - ha.min);
  axes(doc, svg, { x, y, qa, ha, W, H, m });
  if (b) {
    const pts = [];
    stages.forEach((h, i) => b.high[i] != null && pts.push(`${x(b.high[i]).toFixed(1)},${y(h).toFixed(1)}`));
    for (let i = stages.length - 1; i >= 0; i -= 1) if (b.low[i] != null) pts.push(`${x(b.low[i]).toFixed(1)},${y(stages[i]).toFixed(1)}`);
    el(doc, "path", { d: `M${pts.join("L")}Z`, class: "rating-band" }, svg);
  }
  el(doc, "path", { d: pathOf(q, stages, x, y), class: "rating-curve", fill: "none" }, svg);
  const g = el(doc, "g", { class: "gaugings" }, svg);
  for (const d of devs) {
    const at = `translate(${x(d.discharge_m3s).toFixed(1)},${y(d.stage_m).toFixed(1)})`;
    const mk = el(doc, "path", { d: MARKS[d.quality] || MARKS.excellent, transform: at, class: `gauging q-${d.quality}` }, g);
    const dev = d.deviation_pct == null ? "" : `, ${d.deviation_pct.toFixed(1)} %`;
    el(doc, "title", {}, mk, `${d.time}: ${d.stage_m} m, ${d.discharge_m3s} m³/s, ${d.quality}${dev}`);
  }
  return svg;
}

function axes(doc, svg, { x, y, qa, ha, W, H, m }) {
  const g = el(doc, "g", { class: "axes" }, svg);
  el(doc, "path", { d: `M${m.l},${m.t}V${H - m.b}H${W - m.r}`, class: "axis", fill: "none" }, g);
  for (const v of qa.ticks) el(doc, "text", { x: x(v).toFixed(1), y: H - m.b + 16, "text-anchor": "middle", class: "tick" }, g, v.toFixed(qa.decimals));
  for (const v of ha.ticks) el(doc, "text", { x: m.l - 6, y: (y(v) + 4).toFixed(1), "text-anchor": "end", class: "tick" }, g, v.toFixed(ha.decimals));
  el(doc, "text", { x: (m.l + W - m.r) / 2, y: H - 6, "text-anchor": "middle", class: "axis-label" }, g, "Discharge (m³/s)");
  el(doc, "text", { x: 14, y: (m.t + H - m.b) / 2, "text-anchor": "middle", class: "axis-label", transform: `rotate(-90 14 ${(m.t + H - m.b) / 2})` }, g, "Stage (m)");
}

/** The text beside a gauge's chart, one line per item; `at` words a time. */
export function ratingLines(ratings, gaugings, now, at = (t) => t) {
  const lines = [];
  const versions = ratings?.versions || [];
  const inForce = curveAt(ratings, now);
  if (!versions.length) lines.push("No rating versions: the gauge's own curve is in force.");
  for (const v of versions) lines.push(`Version ${v.version}, valid from ${at(v.valid_from)}: ${v.note}`);
  if (inForce) lines.push(`In force now: ${inForce.version == null ? "the gauge's own curve" : `version ${inForce.version}`}.`);
  const shifts = shiftsInForce(ratings, now);
  if (shifts.length) {
    for (const s of shifts) lines.push(`Shift in force: ${s.offset_m >= 0 ? "+" : ""}${s.offset_m.toFixed(2)} m from ${at(s.from)}${s.to ? ` to ${at(s.to)}` : ""} (${s.reason}).`);
  } else {
    lines.push("No shift in force.");
  }
  const rms = rmsDeviation(deviations(ratings, gaugings));
  const n = (gaugings || []).length;
  if (!n) lines.push("No gaugings yet, so no deviation band.");
  else lines.push(`${n} gauging${n === 1 ? "" : "s"}; RMS deviation from the curve in force at each: ${rms == null ? "none computable" : `${rms.toFixed(1)} %`}.`);
  return lines;
}
