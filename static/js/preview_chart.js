// The upload preview's small SVG: the observed inflow (solid), the upload
// in force (dotted) and the new upload (dashed), one discharge axis, the
// join marked. Takes the document to draw in; scales from chart.js.

import { linearScale, niceTicks, timeTicks } from "./chart.js";
import { formatClock, toMs } from "./format.js";

const NS = "http://www.w3.org/2000/svg";
const W = 640;
const H = 220;
const M = { l: 56, r: 12, t: 24, b: 30 };

function el(doc, name, attrs = {}, text) {
  const e = doc.createElementNS(NS, name);
  for (const [k, v] of Object.entries(attrs)) e.setAttribute(k, String(v));
  if (text != null) e.textContent = text;
  return e;
}

/** Samples [{time, discharge}] as [[ms, q]]. */
const pts = (series) => (series || []).map((s) => [toMs(s.time), s.discharge]);

/**
 * `lines`: { observed, current, next } sample lists (any may be empty);
 * `join`: the dry run's join (may be null); `zone`: the reach's clock.
 */
export function renderPreviewChart(doc, lines, join, zone, title) {
  const all = [pts(lines.observed), pts(lines.current), pts(lines.next)];
  const flat = all.flat();
  const svg = el(doc, "svg", { viewBox: `0 0 ${W} ${H}`, width: W, height: H, role: "img", class: "chart preview-chart" });
  svg.append(el(doc, "title", {}, title));
  if (flat.length < 2) return svg;
  const t0 = Math.min(...flat.map((p) => p[0]));
  const t1 = Math.max(...flat.map((p) => p[0]));
  const y = niceTicks(0, Math.max(...flat.map((p) => p[1])), 4);
  const sx = linearScale(t0, t1, M.l, W - M.r);
  const sy = linearScale(y.min, y.max, H - M.b, M.t);
  for (const v of y.ticks) {
    svg.append(el(doc, "line", { x1: M.l, x2: W - M.r, y1: sy(v), y2: sy(v), class: "grid", stroke: "#d5dbe1" }));
    svg.append(el(doc, "text", { x: M.l - 6, y: sy(v) + 4, "text-anchor": "end", class: "tick", "font-size": 12 }, `${v.toFixed(y.decimals)}`));
  }
  svg.append(el(doc, "text", { x: 4, y: 12, class: "tick", "font-size": 12 }, "discharge, m³/s"));
  for (const t of timeTicks(t0, t1, zone, 6).ticks) {
    svg.append(el(doc, "text", { x: sx(t), y: H - 10, "text-anchor": "middle", class: "tick", "font-size": 12 }, formatClock(t, zone)));
  }
  const path = (p) => p.map(([t, q], i) => `${i ? "L" : "M"}${sx(t).toFixed(1)},${sy(q).toFixed(1)}`).join("");
  // Presentation attributes, not CSS: the drawing reads the same in print
  // and needs nothing from the page's style sheet.
  const styles = [
    { class: "line-observed", stroke: "#1d2733", "stroke-width": 2.5 },
    { class: "line-current", stroke: "#6b7785", "stroke-width": 2, "stroke-dasharray": "2 4" },
    { class: "line-next", stroke: "#b03a12", "stroke-width": 2.5, "stroke-dasharray": "8 5" },
  ];
  all.forEach((p, i) => {
    if (p.length > 1) svg.append(el(doc, "path", { d: path(p), fill: "none", ...styles[i] }));
  });
  if (join?.last_observed && join.upload_at_join != null) {
    const x = sx(toMs(join.last_observed.time));
    svg.append(el(doc, "line", { x1: x, x2: x, y1: sy(join.last_observed.discharge), y2: sy(join.upload_at_join), class: "jump", stroke: "#8a5a00", "stroke-width": 2 }));
    svg.append(el(doc, "circle", { cx: x, cy: sy(join.upload_at_join), r: 4, class: "jump-dot", fill: "#8a5a00" }));
  }
  return svg;
}
