// How past forecasts verified, as the dashboard says it: one sentence per
// point beside its chart, and per gauged point a table and a small chart
// of skill by lead time. Pure functions of the API's answers (the
// `verification` brief of a forecast point, and the points of
// GET /api/reaches/{reach}/verification); no figure is shown for a band
// with too little history, which says "not yet verified" instead.

import { el } from "./svg.js";

/** "0–3 h" for a band. */
export function bandLabel(b) {
  return `${b.from_h}–${b.to_h} h`;
}

/** A metre figure to the centimetre, or a dash. */
function metres(v) {
  return v == null || !Number.isFinite(v) ? "–" : `${v.toFixed(2)} m`;
}

/**
 * Skill against persistence in words: "38 % better than holding the last
 * reading", "12 % worse …", "no better …".
 */
export function skillWords(skill) {
  if (skill == null || !Number.isFinite(skill)) return "no comparison with holding the last reading";
  const pct = Math.round(skill * 100);
  if (pct > 0) return `${pct} % better than holding the last reading`;
  if (pct < 0) return `${-pct} % worse than holding the last reading`;
  return "no better than holding the last reading";
}

/**
 * One sentence for a point's forecast: how forecasts here have verified
 * over the shortest band that is verified, or why there is no figure.
 */
export function trackRecord(brief) {
  if (!brief) return "Track record: not available.";
  if (brief.status === "no_gauge") return "Track record: not verified (no gauge at this point to compare with).";
  const verified = (brief.bands || []).filter((b) => b.status === "verified");
  if (!verified.length) return `Track record: not yet verified (too few past forecasts here have been compared with the gauge, last ${brief.days} days).`;
  const parts = verified.map((b) => `${bandLabel(b)} ahead, typical error ${metres(b.mae_m)} (${skillWords(b.skill_mae)}; ${b.runs} runs)`);
  const rest = (brief.bands || []).filter((b) => b.status !== "verified").map(bandLabel);
  const tail = rest.length ? `; ${rest.join(", ")} ahead: not yet verified` : "";
  return `Track record, last ${brief.days} days: ${parts.join("; ")}${tail}. Past accuracy does not guarantee this forecast.`;
}

/** The table rows of one point's verification: one per band. */
export function bandRows(point) {
  return (point.bands || []).map((b) => {
    const ok = b.status === "verified";
    return {
      band: bandLabel(b),
      runs: String(b.runs),
      pairs: String(b.pairs),
      mae: ok ? metres(b.model.mae_m) : "–",
      bias: ok ? metres(b.model.bias_m) : "–",
      persistence: ok ? metres(b.persistence.mae_m) : "–",
      skill: ok && b.skill_mae != null ? `${Math.round(b.skill_mae * 100)} %` : "–",
      crps: ok && b.ensemble?.crps_m != null ? metres(b.ensemble.crps_m) : "–",
      status: ok ? "verified" : "not yet verified",
    };
  });
}

/** One line per level of the contingency table over observed runs. */
export function levelLines(events) {
  if (!events || !events.events) return [];
  return (events.levels || []).map((l) => {
    const pod = l.pod == null ? "–" : `${Math.round(l.pod * 100)} %`;
    const far = l.far == null ? "–" : `${Math.round(l.far * 100)} %`;
    return `${l.id} (${l.elevation_m.toFixed(2)} m): ${l.hits} hit, ${l.false_alarms} false alarm, ${l.misses} missed, ${l.correct_negatives} correctly quiet; detected ${pod}, false alarms ${far}`;
  });
}

/** The crest errors in one sentence, or null without crests. */
export function crestLine(events) {
  if (!events || !events.crests) return null;
  const h = events.crest_timing_bias_h;
  const when = h == null ? "" : `, on average ${Math.abs(h).toFixed(1)} h ${h >= 0 ? "late" : "early"}`;
  return `Crests of ${events.crests} observed runs: forecast ${metres(Math.abs(events.crest_stage_bias_m))} ${events.crest_stage_bias_m >= 0 ? "too high" : "too low"} on average (typical error ${metres(events.crest_stage_mae_m)})${when}.`;
}

/**
 * A small bar chart of skill against persistence by band: bars above the
 * zero line beat holding the last reading, below it did worse; a band not
 * yet verified has no bar and says so under its label.
 */
export function skillChart(doc, point, { width = 320, height = 140, titleId }) {
  const bands = point.bands || [];
  const pad = { l: 44, r: 8, t: 10, b: 34 };
  const svg = el(doc, "svg", { viewBox: `0 0 ${width} ${height}`, width, height, role: "img", class: "skill-chart", "aria-labelledby": titleId });
  el(doc, "title", { id: titleId }, svg, `Skill against holding the last reading by lead time at ${point.name}: ${bands.map((b) => `${bandLabel(b)} ${b.status === "verified" && b.skill_mae != null ? `${Math.round(b.skill_mae * 100)} %` : "not yet verified"}`).join(", ")}.`);
  const shown = bands.map((b) => (b.status === "verified" && Number.isFinite(b.skill_mae) ? b.skill_mae : null));
  const lo = Math.min(-0.25, ...shown.filter((v) => v != null));
  const hi = Math.max(1, ...shown.filter((v) => v != null));
  const y = (v) => pad.t + ((hi - v) / (hi - lo)) * (height - pad.t - pad.b);
  const slot = (width - pad.l - pad.r) / Math.max(bands.length, 1);
  for (const v of [lo, 0, hi]) {
    el(doc, "line", { x1: pad.l, x2: width - pad.r, y1: y(v), y2: y(v), class: v === 0 ? "axis" : "grid" }, svg);
    el(doc, "text", { x: pad.l - 4, y: y(v) + 4, "text-anchor": "end", class: "tick" }, svg, `${Math.round(v * 100)} %`);
  }
  bands.forEach((b, i) => {
    const x = pad.l + i * slot;
    const v = shown[i];
    if (v != null) {
      const top = Math.min(y(v), y(0));
      el(doc, "rect", { x: x + slot * 0.2, width: slot * 0.6, y: top, height: Math.max(Math.abs(y(v) - y(0)), 1), class: v >= 0 ? "bar-better" : "bar-worse", "data-band": bandLabel(b) }, svg);
    }
    el(doc, "text", { x: x + slot / 2, y: height - pad.b + 14, "text-anchor": "middle", class: "tick" }, svg, bandLabel(b));
    if (v == null) el(doc, "text", { x: x + slot / 2, y: height - pad.b + 27, "text-anchor": "middle", class: "tick muted" }, svg, "not yet");
  });
  return svg;
}

/**
 * What the correction at the point's gauge does for this run, in words:
 * in use (and from what error), or off and why. The levels and warnings
 * above stay those of the raw model.
 */
export function correctionText(c, unit) {
  if (!c) return null;
  const reason = String(c.reason || "").replace(/^(on|off): /, "");
  if (c.on) {
    const e = Number.isFinite(c.initial_error) ? `${c.initial_error >= 0 ? "+" : ""}${c.initial_error.toFixed(2)} ${unit}` : "?";
    const keep = Number.isFinite(c.decay_per_hour) ? `, ${Math.round(c.decay_per_hour * 100)} % of it kept per hour` : "";
    return `Corrected at the gauge (dotted line): the gauge read ${e} against the model at issue time${keep}; ${reason}. Levels and warnings use the raw model.`;
  }
  return `Correction at the gauge not in use: ${reason}.`;
}
