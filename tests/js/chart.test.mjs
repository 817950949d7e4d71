// Unit tests for the dashboard's pure chart and format functions.
// Run: node --test tests/js/   (tests/it/dashboard_js.rs runs this under cargo test)
import { test } from "node:test";
import assert from "node:assert/strict";

import { HOUR_STEPS, MIN_GAP_PX, linearScale, niceStep, niceTicks, spreadLabels, stageTicks, tickAnchor, timeTicks } from "../../static/js/chart.js";
import { formatDuration, formatTime, offsetLabel, offsetMinutes, wallClock } from "../../static/js/format.js";

const H = 3_600_000;

test("niceStep picks 1, 2 or 5 times a power of ten", () => {
  assert.equal(niceStep(10, 5), 2);
  assert.equal(niceStep(4.1, 5), 1);
  assert.equal(niceStep(1.7, 5), 0.5);
  assert.equal(niceStep(0.9, 5), 0.2);
  assert.equal(niceStep(230, 5), 50);
  assert.equal(niceStep(0.004, 4), 0.001);
  for (const span of [0.013, 0.7, 3.3, 9.99, 47, 1234, 98765]) {
    const s = niceStep(span, 5);
    const mantissa = s / 10 ** Math.floor(Math.log10(s) + 1e-9);
    assert.ok([1, 2, 5].some((m) => Math.abs(mantissa - m) < 1e-9), `${span} -> ${s}`);
    assert.ok(span / s <= 5 + 1e-9, `at most 5 intervals for ${span}: step ${s}`);
  }
});

test("niceTicks covers the data with whole steps and exact decimals", () => {
  const t = niceTicks(47.04, 51.64, 6);
  assert.equal(t.step, 1);
  assert.deepEqual(t.ticks, [47, 48, 49, 50, 51, 52]);
  assert.ok(t.min <= 47.04 && t.max >= 51.64);

  const f = niceTicks(0.1, 0.7, 5);
  assert.equal(f.step, 0.2);
  assert.deepEqual(f.ticks, [0, 0.2, 0.4, 0.6, 0.8]); // no 0.6000000000000001
  assert.equal(f.decimals, 1);

  const flat = niceTicks(3, 3);
  assert.ok(flat.min < 3 && flat.max > 3, "a flat series still gets a span");

  const neg = niceTicks(-12, 7, 5);
  assert.equal(neg.step, 5);
  assert.deepEqual(neg.ticks, [-15, -10, -5, 0, 5, 10]);
});

test("linearScale maps and inverts, including a flipped pixel range", () => {
  const y = linearScale(40, 50, 300, 0);
  assert.equal(y(40), 300);
  assert.equal(y(50), 0);
  assert.equal(y(45), 150);
  assert.equal(y.invert(75), 47.5);
});

test("time ticks fall on whole hours of a fixed-offset zone", () => {
  // 2026-03-14T00:10Z .. 2026-03-15T00:00Z in +01:00 is 01:10 .. 01:00 local.
  const t0 = Date.parse("2026-03-14T00:10:00Z");
  const t1 = Date.parse("2026-03-15T00:00:00Z");
  const { stepHours, ticks } = timeTicks(t0, t1, "+01:00", 8);
  assert.ok(HOUR_STEPS.includes(stepHours));
  // Local 01:10 .. 01:00 next day: 1 h and 2 h steps give too many ticks;
  // 3 h gives 03, 06, ..., 21, 00 = 8.
  assert.equal(stepHours, 3);
  assert.ok(ticks.length <= 8 && ticks.length >= 3);
  for (const t of ticks) {
    const w = wallClock(t, "+01:00");
    assert.equal(w.minute, 0, "whole hour");
    assert.equal(w.hour % stepHours, 0, "multiple of the step on the local clock");
    assert.ok(t >= t0 && t <= t1);
  }
  assert.equal(wallClock(ticks[0], "+01:00").hour, 3);
  assert.equal(ticks.length, 8);
});

test("time ticks respect a half-hour offset: whole local hours, not whole UTC hours", () => {
  const t0 = Date.parse("2026-03-14T00:00:00Z");
  const t1 = Date.parse("2026-03-14T06:00:00Z");
  const { stepHours, ticks } = timeTicks(t0, t1, "+05:30", 8);
  assert.equal(stepHours, 1);
  for (const t of ticks) {
    assert.equal(new Date(t).getUTCMinutes(), 30, "a whole hour at +05:30 is hh:30 UTC");
    assert.equal(wallClock(t, "+05:30").minute, 0);
  }
});

test("daily ticks land on local midnight", () => {
  const t0 = Date.parse("2026-03-10T00:00:00Z");
  const t1 = Date.parse("2026-03-16T00:00:00Z");
  const { stepHours, ticks } = timeTicks(t0, t1, "-04:00", 7);
  assert.equal(stepHours, 24);
  for (const t of ticks) assert.equal(wallClock(t, "-04:00").hour, 0);
  assert.equal(ticks.length, 6);
});

test("time ticks on an IANA zone across a daylight-saving change stay on whole local hours", () => {
  // Europe/London springs forward at 2026-03-29T01:00Z (01:00 GMT -> 02:00 BST).
  const t0 = Date.parse("2026-03-28T18:00:00Z");
  const t1 = Date.parse("2026-03-29T12:00:00Z");
  const { stepHours, ticks } = timeTicks(t0, t1, "Europe/London", 8);
  assert.ok(ticks.length >= 3);
  for (const t of ticks) {
    const w = wallClock(t, "Europe/London");
    assert.equal(w.minute, 0);
    assert.equal(w.hour % stepHours, 0, `${new Date(t).toISOString()} local ${w.hour}:00`);
  }
  assert.equal(offsetMinutes("Europe/London", Date.parse("2026-03-29T00:30:00Z")), 0);
  assert.equal(offsetMinutes("Europe/London", Date.parse("2026-03-29T01:30:00Z")), 60);
});

test("times are written on the reach's clock with the offset visible", () => {
  assert.equal(formatTime("2026-03-14T19:30:00Z", "+01:00"), "Sat 14 Mar 20:30 (+01:00)");
  assert.equal(formatTime("2026-03-14T23:30:00Z", "+01:00"), "Sun 15 Mar 00:30 (+01:00)");
  assert.equal(formatTime("2026-07-01T12:00:00Z", "Europe/London"), "Wed 1 Jul 13:00 (+01:00)");
  assert.equal(formatTime("2026-03-14T12:00:00Z", "-05:30"), "Sat 14 Mar 06:30 (-05:30)");
  assert.equal(formatTime(null, "+01:00"), "–");
  assert.equal(offsetLabel(-330), "-05:30");
});

test("durations read naturally", () => {
  assert.equal(formatDuration(20), "under 1 min");
  assert.equal(formatDuration(45 * 60), "45 min");
  assert.equal(formatDuration(3 * 3600 + 15 * 60), "3 h 15 min");
  assert.equal(formatDuration(2 * 86400 + 4 * 3600 + 59), "2 d 4 h");
  assert.equal(formatDuration(H / 1000), "1 h");
});

test("labels are spread apart and kept inside the plot", () => {
  const out = spreadLabels([100, 104, 300], 12, 10, 290);
  assert.ok(out[1] - out[0] >= 12);
  assert.ok(out[2] <= 290);
  assert.ok(out[2] - out[1] >= 12);
});

// An invented bridge: data from 47.0 m (bed side of the hydrograph) to the
// deck at 52.64 m, low chord 51.64 m, drawn on a 194 px high phone plot.
const PHONE_PLOT_PX = 194;
const pxOf = (t, len) => (len * PHONE_PLOT_PX) / (t.max - t.min);

test("a crest 5 cm under the low chord gets an axis that shows the gap", () => {
  const full = niceTicks(47.0, 52.64, 4);
  assert.ok(pxOf(full, 0.05) < 2, "on the full axis 5 cm is under 2 px");
  const t = stageTicks(47.0, 52.64, { crest: 51.59, lowChord: 51.64, plotPx: PHONE_PLOT_PX, resolution: 0.05, target: 4 });
  assert.equal(t.zoomed, true);
  assert.ok(t.min <= 51.59 && t.max >= 51.64, `crest and low chord on the axis: ${t.min}..${t.max}`);
  assert.ok(pxOf(t, 0.05) >= MIN_GAP_PX, `5 cm is ${pxOf(t, 0.05).toFixed(1)} px`);
  const mantissa = t.step / 10 ** Math.floor(Math.log10(t.step) + 1e-9);
  assert.ok([1, 2, 5].some((m) => Math.abs(mantissa - m) < 1e-9), `nice step ${t.step}`);
  assert.ok(t.ticks.length >= 3, `enough labelled ticks: ${t.ticks}`);
});

test("a crest over the low chord by 1 cm still gets 5 cm resolved; feet too", () => {
  const t = stageTicks(47.0, 52.64, { crest: 51.65, lowChord: 51.64, plotPx: PHONE_PLOT_PX, resolution: 0.05 });
  assert.ok(pxOf(t, 0.05) >= MIN_GAP_PX && t.min <= 51.64 && t.max >= 51.65);
  // The same bridge in feet (0.3048 m each, NIST SP 811): 5 cm = 0.164 ft.
  const ft = (m) => m / 0.3048;
  const u = stageTicks(ft(47.0), ft(52.64), { crest: ft(51.6), lowChord: ft(51.64), plotPx: PHONE_PLOT_PX, resolution: ft(0.05) });
  assert.equal(u.zoomed, true);
  assert.ok(pxOf(u, ft(0.05)) >= MIN_GAP_PX, `${pxOf(u, ft(0.05))} px`);
  assert.ok(u.min <= ft(51.6) && u.max >= ft(51.64));
});

test("the axis is not zoomed when the clearance already shows, or there is no bridge", () => {
  const far = stageTicks(47.0, 52.64, { crest: 49.0, lowChord: 51.64, plotPx: PHONE_PLOT_PX, resolution: 0.05, target: 4 });
  assert.deepEqual(far, niceTicks(47.0, 52.64, 4));
  const none = stageTicks(47.0, 52.64, { crest: 51.6, lowChord: null, plotPx: PHONE_PLOT_PX, resolution: 0.05, target: 4 });
  assert.deepEqual(none, niceTicks(47.0, 52.64, 4));
  // A big plot resolves 5 cm on the full axis by itself: 0.05 * 2000 / 6 = 16.7 px.
  const tall = stageTicks(47.0, 52.64, { crest: 51.6, lowChord: 51.64, plotPx: 2000, resolution: 0.05, target: 4 });
  assert.equal(tall.zoomed, undefined);
});

test("time labels near the chart's edges are anchored inwards", () => {
  assert.equal(tickAnchor(20, 30, 0, 360), "start");
  assert.equal(tickAnchor(345, 30, 0, 360), "end");
  assert.equal(tickAnchor(180, 30, 0, 360), "middle");
});
