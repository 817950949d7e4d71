// Unit tests for the scenarios' range and wording (static/js/ensemble.js).
// Invented figures; times on a fixed +01:00 clock. 18 March 2026 is a
// Wednesday (`date -d 2026-03-18 +%a`).
import { test } from "node:test";
import assert from "node:assert/strict";

import { BAND, bandPath, bandTraces, bandValues, chanceLines, chanceSentence, crestRangeText, defaultsNote, ensembleSummary, joinOr, modelReaches, onlyInScenarios, percentText, percentileName, rangeNote, scenarios } from "../../static/js/ensemble.js";
import { linearScale } from "../../static/js/chart.js";

const ZONE = "+01:00";
const NOW = "2026-03-18T10:00:00Z"; // Wed 11:00 on the +01:00 clock
const ISSUED = "2026-03-18T09:00:00Z"; // the run's issue time, an hour before
const ready = { status: "ready", members: 20, members_used: 20, failed_members: 0, seed: 7, percentiles: [10, 50, 90], spreads_are_defaults: false, wall_time_s: 1.2, error: null };
const traces = [
  { percentile: 90, stage: [3, 4, 5] },
  { percentile: 10, stage: [1, 2, 3] },
  { percentile: 50, stage: [2, 3, 4] },
];

test("the band runs from the lowest to the highest served percentile, the median beside it", () => {
  const b = bandTraces(traces);
  assert.equal(b.lo.percentile, 10);
  assert.equal(b.hi.percentile, 90);
  assert.equal(b.mid.percentile, 50);
  // Without a 50th there is no median to draw, the band stays.
  const noMid = bandTraces([traces[0], traces[1]]);
  assert.equal(noMid.mid, null);
  assert.equal(noMid.lo.percentile, 10);
  // One percentile (or none) is no range.
  assert.equal(bandTraces([traces[0]]), null);
  assert.equal(bandTraces([]), null);
  assert.equal(bandTraces(undefined), null);
  assert.deepEqual(bandValues(b).sort((a, c) => a - c), [1, 2, 3, 3, 4, 5]);
  assert.deepEqual(bandValues(null), []);
});

test("the band's outline goes along the top forwards and back along the bottom", () => {
  // x: 0..2 -> 0..200 px; y: 0..10 -> 100..0 px (up is smaller y).
  const x = linearScale(0, 2, 0, 200);
  const y = linearScale(0, 10, 100, 0);
  const d = bandPath([0, 1, 2], [1, 2, 3], [3, 4, 5], x, y);
  // Top (hi): (0, 70) (100, 60) (200, 50); bottom (lo) back: (200, 70) (100, 80) (0, 90).
  assert.equal(d, "M0.0,70.0L100.0,60.0L200.0,50.0L200.0,70.0L100.0,80.0L0.0,90.0Z");
});

test("a missing value splits the band, and a lone sample has no area", () => {
  const x = linearScale(0, 4, 0, 4);
  const y = linearScale(0, 4, 4, 0);
  const d = bandPath([0, 1, 2, 3, 4], [0, 0, null, 0, 0], [1, 1, 1, 1, Number.NaN], x, y);
  // Samples 0-1 make one outline; 3 alone (4 has no top) none.
  assert.equal(d, "M0.0,3.0L1.0,3.0L1.0,4.0L0.0,4.0Z");
  assert.equal((d.match(/Z/g) || []).length, 1);
  assert.equal(bandPath([], [], [], x, y), "");
});

test("percentiles are named p10, p2.5; scenarios counted singular and plural", () => {
  assert.equal(percentileName(10), "p10");
  assert.equal(percentileName(2.5), "p2.5");
  assert.equal(scenarios(1), "1 scenario");
  assert.equal(scenarios(50), "50 scenarios");
  assert.equal(joinOr(["a"]), "a");
  assert.equal(joinOr(["a", "b"]), "a or b");
  assert.equal(joinOr(["a", "b", "c"]), "a, b or c");
});

test("the range note names the percentiles and scenarios, or why there is no band", () => {
  assert.deepEqual(rangeNote(ready, traces, 20, 0), { state: "ready", label: "p10–p90 of 20 scenarios", text: "p10–p90 of 20 scenarios" });
  assert.equal(rangeNote(ready, traces, 19, 1).text, "p10–p90 of 19 scenarios; 1 scenario failed and is left out");
  assert.equal(rangeNote(ready, traces, 17, 3).text, "p10–p90 of 17 scenarios; 3 scenarios failed and are left out");
  assert.equal(rangeNote({ ...ready, status: "pending" }, [], null, null).text, "range pending: the scenarios are still being routed");
  const failed = rangeNote({ ...ready, status: "failed", error: "member 3 did not converge" }, [], null, null);
  assert.deepEqual(failed, { state: "failed", text: "range unavailable: member 3 did not converge" });
  assert.equal(rangeNote(ready, [], null, null).state, "missing");
  assert.equal(rangeNote(null, traces, 20, 0), null, "no ensemble: nothing said");
});

test("default spreads carry the caution; verified ones do not", () => {
  assert.equal(defaultsNote({ ...ready, spreads_are_defaults: true }), "The scenarios' spreads are default assumptions, not verified against this river.");
  assert.equal(defaultsNote(ready), null);
  assert.equal(defaultsNote(null), null);
  assert.match(ensembleSummary({ ...ready, spreads_are_defaults: true }), /count the 20 scenarios routed.*default assumptions, not verified against this river\.$/);
  assert.match(ensembleSummary({ ...ready, status: "pending" }), /^Scenarios: 20 scenarios still being routed/);
  assert.match(ensembleSummary({ ...ready, status: "failed", error: "out of time" }), /^Scenarios unavailable \(out of time\): only the model run is shown\./);
  assert.match(ensembleSummary({ ...ready, members_used: 19, failed_members: 1 }), /19 scenarios routed beside the model run \(1 scenario failed and is left out\)\./);
  assert.equal(ensembleSummary(null), null);
});

test("percentages stay honest at the ends", () => {
  assert.equal(percentText(0.35), "35\u00a0%");
  assert.equal(percentText(0), "0\u00a0%");
  assert.equal(percentText(1), "100\u00a0%");
  assert.equal(percentText(1 / 200), "1\u00a0%");
  assert.equal(percentText(1 / 400), "under 1\u00a0%");
  assert.equal(percentText(399 / 400), "over 99\u00a0%");
});

const chance = (k, n, earliest = null, median = null) => ({ probability: k / n, members: n, members_reaching: k, earliest_first_above: earliest, median_first_above: median });
const lowChord = { id: "low_chord", kind: "low_chord", name: "low chord", elevation: 51.24, exceeded: true };

test("a level's chance in words and numbers, times on the reach's clock", () => {
  const s = chanceSentence({ ...lowChord, chance: chance(7, 20, "2026-03-18T13:20:00Z", "2026-03-18T17:05:00Z") }, NOW, ZONE);
  assert.deepEqual(s, { text: "7 of 20 scenarios reach the low chord (35\u00a0%), earliest Wed 14:20, median Wed 18:05", note: null });
  const one = chanceSentence({ ...lowChord, chance: chance(1, 20, "2026-03-18T13:20:00Z", "2026-03-18T13:20:00Z") }, NOW, ZONE);
  assert.equal(one.text, "1 of 20 scenarios reaches the low chord (5\u00a0%), earliest Wed 14:20");
  const all = chanceSentence({ ...lowChord, chance: chance(20, 20, "2026-03-18T13:20:00Z", "2026-03-18T14:00:00Z") }, NOW, ZONE);
  assert.equal(all.text, "all 20 scenarios reach the low chord (100\u00a0%), earliest Wed 14:20, median Wed 15:00");
  // Already above in the earliest scenario: a past time is not "earliest" ahead.
  const past = chanceSentence({ ...lowChord, chance: chance(20, 20, "2026-03-18T09:00:00Z", "2026-03-18T09:00:00Z") }, NOW, ZONE);
  assert.equal(past.text, "all 20 scenarios reach the low chord (100\u00a0%), the earliest above since Wed 10:00");
  const threshold = chanceSentence({ kind: "threshold", name: "road awash", exceeded: true, chance: chance(3, 50, "2026-03-18T22:45:00Z", "2026-03-19T01:00:00Z") }, NOW, ZONE);
  assert.equal(threshold.text, "3 of 50 scenarios reach road awash (6\u00a0%), earliest Wed 23:45, median Thu 02:00");
  assert.equal(chanceSentence({ ...lowChord }, NOW, ZONE), null, "no chance, no sentence");
});

test("levels only the scenarios reach, or only the model run, say so", () => {
  const deck = { id: "deck", kind: "deck", name: "deck", elevation: 52.24, exceeded: false, chance: chance(2, 50, "2026-03-18T19:00:00Z", "2026-03-18T19:30:00Z") };
  assert.deepEqual(chanceSentence(deck, NOW, ZONE), { text: "2 of 50 scenarios reach the deck (4\u00a0%), earliest Wed 20:00, median Wed 20:30", note: "only in scenarios, not in the model run" });
  const modelOnly = chanceSentence({ ...lowChord, chance: chance(0, 50) }, NOW, ZONE);
  assert.deepEqual(modelOnly, { text: "none of the 50 scenarios reaches the low chord (0\u00a0%)", note: "only in the model run, in none of the scenarios" });
});

test("the overview's lines per point: one per level reached, then the levels none reach", () => {
  // Listed out of order: the lines go up the levels, lowest first.
  const levels = [
    { id: "rail", kind: "threshold", name: "rail line", elevation: 53, exceeded: false, chance: chance(0, 20) },
    { id: "bank-full", kind: "threshold", name: "bank full", elevation: 50.24, exceeded: true, chance: chance(20, 20, "2026-03-18T09:00:00Z", "2026-03-18T09:00:00Z") },
    { ...lowChord, chance: chance(7, 20, "2026-03-18T13:20:00Z", "2026-03-18T17:05:00Z") },
    { id: "deck", kind: "deck", name: "deck", elevation: 52.24, exceeded: false, chance: chance(0, 20) },
  ];
  const point = { name: "Marl Bridge", times: [], stage: [], levels };
  const lines = chanceLines(point, ready, NOW, ZONE, ISSUED);
  assert.deepEqual(lines.map((l) => l.id), ["bank-full", "low_chord", null]);
  assert.equal(lines[1].text, "7 of 20 scenarios reach the low chord (35\u00a0%), earliest Wed 14:20, median Wed 18:05");
  assert.equal(lines[2].text, "none of the 20 scenarios reaches the deck or rail line");
  assert.deepEqual(chanceLines(point, { ...ready, status: "pending" }, NOW, ZONE, ISSUED), [{ text: "scenarios pending: still being routed", note: null, id: null }]);
  assert.equal(chanceLines(point, { ...ready, status: "failed", error: "out of memory" }, NOW, ZONE, ISSUED)[0].text, "scenarios unavailable: out of memory");
  assert.deepEqual(chanceLines(point, null, NOW, ZONE, ISSUED), [], "no ensemble: no lines");
  // A single scenario reads in the singular.
  const single = chanceLines({ levels: [{ ...lowChord, chance: chance(1, 1, "2026-03-18T13:20:00Z") }, { id: "deck", kind: "deck", name: "deck", elevation: 52.24, exceeded: false, chance: chance(0, 1) }] }, ready, NOW, ZONE, ISSUED);
  assert.equal(single[0].text, "the only scenario reaches the low chord (100\u00a0%), earliest Wed 14:20");
  assert.equal(single[1].text, "the only scenario does not reach the deck");
});

test("the scenarios' crests in words", () => {
  const crest = { min: 51.16, max: 51.54, percentiles: [{ percentile: 90, stage: 51.49 }, { percentile: 10, stage: 51.21 }, { percentile: 50, stage: 51.33 }] };
  assert.equal(crestRangeText(crest, "m"), "scenario crests p10 51.21 m to p90 51.49 m (lowest 51.16 m, highest 51.54 m)");
  assert.equal(crestRangeText({ min: 1, max: 2, percentiles: [] }, "m"), null);
  assert.equal(crestRangeText(null, "m"), null);
});

// WCAG 2.1 relative luminance and contrast ratio (its definitions, used by
// SC 1.4.3 and 1.4.11): graphics needed to read a chart need 3:1 against
// their background.
const lin = (c) => (c <= 0.03928 ? c / 12.92 : ((c + 0.055) / 1.055) ** 2.4);
const lum = (hex) => {
  const [r, g, b] = [1, 3, 5].map((i) => lin(parseInt(hex.slice(i, i + 2), 16) / 255));
  return 0.2126 * r + 0.7152 * g + 0.0722 * b;
};
const ratio = (a, b) => (Math.max(lum(a), lum(b)) + 0.05) / (Math.min(lum(a), lum(b)) + 0.05);

test("the band's edges and median stand out from the white chart by 3:1 (WCAG 2.1 SC 1.4.11)", () => {
  assert.ok(ratio(BAND.edge, "#ffffff") >= 3, `edge ${ratio(BAND.edge, "#ffffff").toFixed(2)}:1`);
  assert.ok(ratio(BAND.median, "#ffffff") >= 3, `median ${ratio(BAND.median, "#ffffff").toFixed(2)}:1`);
  assert.ok(ratio(BAND.median, BAND.fill) >= 3, `median on the fill ${ratio(BAND.median, BAND.fill).toFixed(2)}:1`);
  // The fill is light: the deterministic trace (#b03a12) drawn over it keeps 3:1.
  assert.ok(ratio("#b03a12", BAND.fill) >= 3, `forecast on the fill ${ratio("#b03a12", BAND.fill).toFixed(2)}:1`);
});

test("the summary names the levels only scenarios reach, across the points", () => {
  const points = [
    { name: "Marl Bridge", levels: [{ ...lowChord, chance: chance(12, 12) }, { id: "deck", kind: "deck", name: "deck", elevation: 52.24, exceeded: false, chance: chance(5, 12) }] },
    { name: "Tern ford", levels: [{ id: "lane", kind: "threshold", name: "close the lane", elevation: 45.4, exceeded: false, chance: chance(1, 12) }, { id: "road", kind: "threshold", name: "road awash", elevation: 44.9, exceeded: false, chance: chance(0, 12) }] },
  ];
  assert.equal(onlyInScenarios(points, ready, ISSUED), "Reached only in scenarios, not in the model run: the deck at Marl Bridge (5 of 12); close the lane at Tern ford (1 of 12).");
  assert.equal(onlyInScenarios(points.slice(0, 1).map((p) => ({ ...p, levels: p.levels.slice(0, 1) })), ready, ISSUED), null, "the model run reaches all the scenarios do");
  assert.equal(onlyInScenarios(points, { ...ready, status: "pending" }, ISSUED), null);
  assert.equal(onlyInScenarios(points, null, ISSUED), null);
});

test("a level the model run crossed and left between the issue time and now is not 'only in scenarios'", () => {
  // Chances count from the issue time (09:00Z), `exceeded` only from now
  // (10:00Z): the run was over the 16.0 m level at 09:30Z only.
  const level = { id: "low", kind: "threshold", name: "low", elevation: 16, exceeded: false, chance: chance(4, 12, "2026-03-18T09:20:00Z", "2026-03-18T09:40:00Z") };
  const point = { name: "Marl Bridge", times: ["2026-03-18T08:30:00Z", "2026-03-18T09:00:00Z", "2026-03-18T09:30:00Z", "2026-03-18T10:00:00Z"], stage: [15.5, 15.8, 16.2, 15.9], levels: [level] };
  assert.equal(modelReaches(point, level, ISSUED), true);
  assert.equal(chanceLines(point, ready, NOW, ZONE, ISSUED)[0].note, null);
  assert.equal(onlyInScenarios([point], ready, ISSUED), null);
  // Above only before the issue time (the look-back) does not count.
  const before = { ...point, stage: [16.5, 15.8, 15.9, 15.9] };
  assert.equal(modelReaches(before, level, ISSUED), false);
  assert.equal(chanceLines(before, ready, NOW, ZONE, ISSUED)[0].note, "only in scenarios, not in the model run");
  assert.match(onlyInScenarios([before], ready, ISSUED), /low at Marl Bridge \(4 of 12\)/);
  assert.equal(modelReaches(point, { ...level, exceeded: true }, ISSUED), true, "exceeded from now on");
});
