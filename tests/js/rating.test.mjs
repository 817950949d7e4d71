// Unit tests for the dashboard's rating chart and its figures.
// Run: node --test tests/js/
//
// References are hand computations of Q = c (h − e)^b (the power form of a
// rating; common practice) and of linear interpolation, worked on paper
// beside each check, and the definition of the deviation of a gauging,
// 100 (Q_measured / Q_rated − 1), and of a root mean square. The chart
// itself is checked in a real browser (tests/it/dashboard.rs).
import { test } from "node:test";
import assert from "node:assert/strict";

import { band, curveAt, deviations, dischargeAt, hasRating, ratingLines, rmsDeviation, shiftAt, stageRange } from "../../static/js/rating.js";

const close = (a, b, tol = 1e-9) => assert.ok(Math.abs(a - b) <= tol, `${a} vs ${b}`);
const power = (c, e, b) => ({ kind: "power", segments: [{ c, e, b }] });
const T0 = Date.parse("2026-03-01T00:00:00Z");
const iso = (ms) => new Date(ms).toISOString();

test("a power segment: Q = c (h − e)^b, zero at and below e", () => {
  const r = power(10, 19, 1.5);
  close(dischargeAt(r, 20), 10); // 10 · 1^1.5
  close(dischargeAt(r, 21), 28.284271247461902); // 10 · 2^1.5 = 10 · 2.8284271
  close(dischargeAt(r, 23), 80); // 10 · 4^1.5 = 10 · 8
  assert.equal(dischargeAt(r, 19), 0);
  assert.equal(dischargeAt(r, 18), 0);
  assert.equal(dischargeAt(r, NaN), null);
});

test("power segments: each applies up to and including its upper stage", () => {
  const r = { kind: "power", segments: [{ c: 5, e: 0, b: 2, upper_stage: 1 }, { c: 4, e: 0.2, b: 1.5 }] };
  close(dischargeAt(r, 1), 5); // lower segment at its breakpoint: 5 · 1²
  close(dischargeAt(r, 0.5), 1.25); // 5 · 0.5² = 1.25
  close(dischargeAt(r, 1.5), 5.9289121, 1e-6); // 4 · 1.3^1.5 = 4 · 1.3 · 1.1401754 = 4 · 1.4822280
  close(dischargeAt(r, 3.2), 20.784609690826528); // 4 · 3^1.5 = 4 · 5.1961524
});

test("a table interpolates linearly and does not extrapolate", () => {
  const r = { kind: "table", points: [[0, 0], [1, 10], [3, 50]] };
  close(dischargeAt(r, 0.5), 5); // halfway from 0 to 10
  close(dischargeAt(r, 2), 30); // halfway from 10 to 50
  close(dischargeAt(r, 1), 10);
  close(dischargeAt(r, 3), 50);
  close(dischargeAt(r, 0), 0);
  assert.equal(dischargeAt(r, 3.01), null);
  assert.equal(dischargeAt(r, -0.01), null);
});

test("the curve in force: the newest version valid from t or earlier, else the gauge's own", () => {
  const ratings = {
    base: power(10, 19, 1.5),
    versions: [
      { version: 1, valid_from: iso(T0), curve: power(20, 19, 1.5), note: "a" },
      { version: 2, valid_from: iso(T0 + 86_400_000), curve: power(30, 19, 1.5), note: "b" },
    ],
    shifts: [],
  };
  assert.equal(curveAt(ratings, T0 - 1).version, null);
  assert.equal(curveAt(ratings, T0).version, 1, "valid_from itself is in force");
  assert.equal(curveAt(ratings, T0 + 86_400_000 - 1).version, 1);
  assert.equal(curveAt(ratings, T0 + 86_400_000).version, 2);
  assert.equal(curveAt({ base: null, versions: [], shifts: [] }, T0), null);
  assert.equal(curveAt({ base: null, versions: ratings.versions, shifts: [] }, T0 - 1), null);
  assert.ok(hasRating(ratings));
  assert.ok(!hasRating({ base: null, versions: [], shifts: [] }));
});

test("deviations use the curve and shift in force at each gauging's time", () => {
  const ratings = {
    base: power(10, 19, 1.5),
    versions: [{ version: 1, valid_from: iso(T0), curve: power(20, 19, 1.5), note: "v1" }],
    shifts: [{ from: iso(T0 + 3_600_000), to: iso(T0 + 7_200_000), offset_m: 1, reason: "weed" }],
  };
  const g = [
    { time: iso(T0 - 1000), stage_m: 20, discharge_m3s: 11, quality: "good" }, // base: 10 → +10 %
    { time: iso(T0 + 1000), stage_m: 20, discharge_m3s: 18, quality: "fair" }, // v1: 20 → −10 %
    // v1 with +1 m: 20 · 2^1.5 = 56.5685; 56.5685 · 1.05 = 59.397
    { time: iso(T0 + 3_600_000), stage_m: 20, discharge_m3s: 56.568542494923804 * 1.05, quality: "excellent" },
    { time: iso(T0 + 7_200_000), stage_m: 18, discharge_m3s: 1, quality: "poor" }, // below e: no deviation
  ];
  close(shiftAt(ratings, T0 + 3_600_000), 1);
  assert.equal(shiftAt(ratings, T0 + 7_200_000), 0, "a shift ends before its `to`");
  const d = deviations(ratings, g).map((x) => x.deviation_pct);
  close(d[0], 10, 1e-9);
  close(d[1], -10, 1e-9);
  close(d[2], 5, 1e-9);
  assert.equal(d[3], null);
  // RMS of 10, −10, 5: sqrt((100 + 100 + 25) / 3) = sqrt(75) = 8.6603
  close(rmsDeviation(deviations(ratings, g)), Math.sqrt(75));
  assert.equal(rmsDeviation([]), null);
});

test("the band is the curve × (1 ± RMS), and there is none without gaugings", () => {
  const r = power(10, 19, 1.5);
  const b = band(r, [19, 20, 21], 10);
  assert.deepEqual(b.low.map((v) => Number(v.toFixed(6))), [0, 9, Number((28.284271247461902 * 0.9).toFixed(6))]);
  assert.deepEqual(b.high.map((v) => Number(v.toFixed(6))), [0, 11, Number((28.284271247461902 * 1.1).toFixed(6))]);
  assert.equal(band(r, [20], null), null);
  const table = { kind: "table", points: [[0, 0], [1, 10]] };
  assert.deepEqual(band(table, [0.5, 2], 20).high, [6, null], "no band outside a table");
});

test("the stage range covers the curve's zero flow and every gauging", () => {
  const s = stageRange(power(10, 19, 1.5), [{ stage_m: 22 }, { stage_m: 18.5 }], 10);
  assert.equal(s.length, 11);
  assert.equal(s[0], 18.5);
  assert.ok(s[10] > 22);
  const t = stageRange({ kind: "table", points: [[1, 0], [4, 9]] }, [], 3);
  assert.deepEqual(t, [1, 2, 3, 4]);
});

test("the text names the versions, the shifts in force and the gaugings' RMS", () => {
  const ratings = {
    base: power(10, 19, 1.5),
    versions: [{ version: 1, valid_from: iso(T0), curve: power(20, 19, 1.5), note: "refit after the flood" }],
    shifts: [{ from: iso(T0), to: null, offset_m: -0.05, reason: "weed growth" }],
  };
  const lines = ratingLines(ratings, [{ time: iso(T0 + 1), stage_m: 20, discharge_m3s: 22, quality: "good" }], T0 + 10);
  assert.ok(lines.includes(`Version 1, valid from ${iso(T0)}: refit after the flood`), lines.join("\n"));
  assert.ok(lines.includes("In force now: version 1."));
  assert.ok(lines.some((l) => l.startsWith(`Shift in force: -0.05 m from ${iso(T0)} (weed growth)`)));
  const worded = ratingLines(ratings, [], T0 + 10, (t) => `<${t}>`);
  assert.ok(worded.includes(`Version 1, valid from <${iso(T0)}>: refit after the flood`), "times go through the caller's wording");
  // at 20 − 0.05 m: 20 · 0.95^1.5 = 18.5187; 22 / 18.5187 − 1 = +18.8 %
  assert.ok(lines.includes("1 gauging; RMS deviation from the curve in force at each: 18.8 %."), lines.join("\n"));
  assert.ok(ratingLines({ base: power(1, 0, 1), versions: [], shifts: [] }, [], T0).includes("No gaugings yet, so no deviation band."));
});
