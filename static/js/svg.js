// Small helpers for building inline SVG, shared by the charts.

export const SVGNS = "http://www.w3.org/2000/svg";

/** An SVG element with attributes (and text), appended to `parent`. */
export function el(doc, name, attrs, parent, text) {
  const e = doc.createElementNS(SVGNS, name);
  for (const [k, v] of Object.entries(attrs)) e.setAttribute(k, String(v));
  if (text != null) e.textContent = text;
  if (parent) parent.appendChild(e);
  return e;
}

/**
 * A path through (xs[i], ys[i]) on the scales x and y; a missing or
 * non-finite value lifts the pen, so gaps stay gaps.
 */
export function pathOf(xs, ys, x, y) {
  let d = "";
  let pen = false;
  for (let i = 0; i < xs.length; i += 1) {
    const v = ys[i];
    if (v == null || !Number.isFinite(v) || !Number.isFinite(xs[i])) {
      pen = false;
      continue;
    }
    d += `${pen ? "L" : "M"}${x(xs[i]).toFixed(1)},${y(v).toFixed(1)}`;
    pen = true;
  }
  return d;
}
