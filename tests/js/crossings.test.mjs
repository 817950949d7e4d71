// Unit tests for the hydrograph's level-crossing marks (static/js/crossings.js).
import { test } from "node:test";
import assert from "node:assert/strict";

import { chartLevels } from "../../static/js/chart.js";
import { crossingMarks, crossingRows, markText, markTitle, placeMarkLabels } from "../../static/js/crossings.js";

const level = (id, kind, elevation, o = {}) => ({
  id, kind, name: id, elevation, severity: "minor", exceeded: false, above_now: false,
  above_since: null, above_since_start: false, first_above: null, back_below: null, duration_above_s: 0, margin: -1, ...o,
});
const t0 = Date.parse("2026-03-14T00:00:00Z");
const t1 = Date.parse("2026-03-15T00:00:00Z");

test("chart levels carry their API level, the low chord and deck by kind", () => {
  const lc = level("low_chord", "low_chord", 19.5);
  const p = { low_chord: 19.5, deck: 20.5, levels: [level("low", "threshold", 16), lc, level("deck", "deck", 20.5)] };
  const ls = chartLevels(p);
  assert.deepEqual(ls.map((l) => [l.kind, l.label, l.value]), [["threshold", "low", 16], ["structure", "low chord", 19.5], ["structure", "deck", 20.5]]);
  assert.equal(ls[1].source, lc);
  // Runs stored before levels: thresholds only, structure without a source.
  const old = chartLevels({ low_chord: 3, thresholds: [{ name: "a", elevation: 2 }] });
  assert.equal(old[1].source, undefined);
  assert.deepEqual(crossingMarks(old, t0, t1), []);
});

test("a level exceeded ahead gets a rise mark and a fall mark, inside the chart's time span only", () => {
  const src = level("low_chord", "low_chord", 19.5, { exceeded: true, first_above: "2026-03-14T14:10:00Z", back_below: "2026-03-15T01:10:00Z" });
  const ls = chartLevels({ low_chord: 19.5, levels: [src, level("never", "threshold", 30)] });
  const marks = crossingMarks(ls, t0, t1);
  // The fall at 01:10Z on the 15th is after t1: left out.
  assert.deepEqual(marks.map((m) => [m.dir, m.t, m.value]), [["up", Date.parse("2026-03-14T14:10:00Z"), 19.5]]);
  const all = crossingMarks(ls, t0, t1 + 3_600_000 * 2);
  assert.deepEqual(all.map((m) => m.dir), ["up", "down"]);
  // On a +01:00 clock, 14:10Z is 15:10 and 01:10Z is 02:10.
  assert.equal(markText(all[0], "+01:00"), "15:10 ↑");
  assert.equal(markText(all[1], "+01:00"), "02:10 ↓");
  assert.equal(markTitle(all[0], "+01:00", "m"), "low chord (19.50 m): the forecast rises above it at Sat 14 Mar 15:10 (+01:00)");
});

test("a level already above now gets only its fall mark", () => {
  const src = level("low", "threshold", 16, { exceeded: true, above_now: true, first_above: "2026-03-14T12:00:00Z", back_below: "2026-03-14T20:00:00Z" });
  assert.deepEqual(crossingMarks(chartLevels({ levels: [src] }), t0, t1).map((m) => m.dir), ["down"]);
});

test("mark labels stay inside the plot and off each other and off blocked boxes", () => {
  const box = { left: 50, right: 400, top: 10, bottom: 200 };
  const marks = [
    { px: 52, py: 100, text: "15:10 ↑" }, // at the left edge: anchored start
    { px: 398, py: 100, text: "02:10 ↓" }, // at the right edge: anchored end
    { px: 60, py: 100, text: "15:20 ↑" }, // on top of the first: moved below
    { px: 200, py: 12, text: "18:00 ↑" }, // no room above the line: below it
  ];
  const blocked = [{ x0: 300, x1: 400, y0: 80, y1: 96 }]; // a level label
  const out = placeMarkLabels(marks, box, blocked);
  assert.equal(out[0].anchor, "start");
  assert.equal(out[1].anchor, "end");
  assert.ok(out[2].y > 100, `second label near the first goes below: ${out[2].y}`);
  assert.ok(out[3].y > 12, "below the line at the top");
  const boxes = out.map((o) => o.box);
  for (const b of boxes) assert.ok(b.x0 >= box.left && b.x1 <= box.right && b.y0 >= box.top && b.y1 <= box.bottom, JSON.stringify(b));
  const cross = (a, b) => a.x0 < b.x1 && b.x0 < a.x1 && a.y0 < b.y1 && b.y0 < a.y1;
  for (let i = 0; i < boxes.length; i += 1) {
    assert.ok(!cross(boxes[i], blocked[0]), `label ${i} clear of the level label`);
    for (let j = i + 1; j < boxes.length; j += 1) assert.ok(!cross(boxes[i], boxes[j]), `labels ${i} and ${j} apart`);
  }
});

test("a label with no free place is left out", () => {
  const out = placeMarkLabels([{ px: 100, py: 20, text: "15:10 ↑" }], { left: 0, right: 200, top: 15, bottom: 25 });
  assert.deepEqual(out, [null]);
});

test("the table rows name each crossed level with its times", () => {
  const rows = crossingRows([
    level("low_chord", "low_chord", 19.5, { exceeded: true, first_above: "2026-03-14T14:10:00Z", back_below: "2026-03-15T01:10:00Z" }),
    level("deck", "deck", 20.5, { exceeded: true, first_above: "2026-03-14T16:00:00Z" }),
    level("low", "threshold", 16, { exceeded: true, above_now: true, back_below: "2026-03-15T03:00:00Z" }),
    level("never", "threshold", 30),
  ], "+01:00");
  assert.deepEqual(rows.map((r) => [r.name, r.above, r.below]), [
    ["low chord", "Sat 14 Mar 15:10 (+01:00)", "Sun 15 Mar 02:10 (+01:00)"],
    ["deck", "Sat 14 Mar 17:00 (+01:00)", "still above at the end of the forecast"],
    ["low", "above now", "Sun 15 Mar 04:00 (+01:00)"],
  ]);
});

test("a label does not cover another mark's dot", () => {
  // Two marks 20 px apart on lines 12 px apart: the upper one's label
  // above its line would do; the lower one's label above would cover the
  // upper dot, so it goes below its line.
  const marks = [{ px: 100, py: 50, text: "10:00 ↑" }, { px: 110, py: 62, text: "10:20 ↓" }];
  const out = placeMarkLabels(marks, { left: 0, right: 300, top: 0, bottom: 200 });
  const dot = { x0: 96, x1: 104, y0: 46, y1: 54 };
  const b = out[1].box;
  assert.ok(!(b.x0 < dot.x1 && dot.x0 < b.x1 && b.y0 < dot.y1 && dot.y0 < b.y1), JSON.stringify(out));
  assert.ok(out[1].y > 62, "below its own line");
});

test("a label with no room above or below goes beside its dot", () => {
  // Level labels fill the rows above and below the mark.
  const blocked = [{ x0: 0, x1: 300, y0: 30, y1: 42 }, { x0: 0, x1: 300, y0: 58, y1: 80 }];
  const [l] = placeMarkLabels([{ px: 100, py: 50, text: "15:10 ↑" }], { left: 0, right: 300, top: 0, bottom: 200 }, blocked);
  assert.equal(l.anchor, "start");
  assert.ok(l.box.x0 > 104, "right of the dot");
});
