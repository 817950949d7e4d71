// Unit tests for the dashboard's verification text and chart.
// Run: node --test tests/js/
import { test } from "node:test";
import assert from "node:assert/strict";

import { bandRows, correctionText, crestLine, levelLines, skillWords, trackRecord } from "../../static/js/verification.js";
import { correctedStage } from "../../static/js/chart.js";

const band = (from, to, status, mae, skill, runs = 12) => ({
  from_h: from, to_h: to, status, runs, pairs: runs * 10,
  mae_m: mae, persistence_mae_m: mae == null ? null : mae / (1 - skill), skill_mae: skill,
});

test("a point with no gauge, and one with too little history, say so instead of a figure", () => {
  assert.match(trackRecord({ status: "no_gauge", days: 30, bands: [] }), /not verified \(no gauge/);
  const young = { status: "not_yet_verified", days: 30, bands: [band(0, 3, "not_yet_verified", 0.5, 0.1, 1)] };
  const text = trackRecord(young);
  assert.match(text, /not yet verified/);
  assert.doesNotMatch(text, /0\.50/, "no figure from too little history");
  assert.equal(trackRecord(undefined), "Track record: not available.");
});

test("a verified band gives its typical error and skill in words, the rest say not yet", () => {
  const brief = { status: "verified", days: 30, bands: [band(0, 3, "verified", 0.042, 0.38), band(3, 6, "not_yet_verified", null, null, 2)] };
  const text = trackRecord(brief);
  assert.match(text, /0–3 h ahead, typical error 0\.04 m \(38 % better than holding the last reading; 12 runs\)/);
  assert.match(text, /3–6 h ahead: not yet verified/);
  assert.match(text, /does not guarantee/);
});

test("skill words: better, worse, equal, absent", () => {
  assert.equal(skillWords(0.25), "25 % better than holding the last reading");
  assert.equal(skillWords(-0.5), "50 % worse than holding the last reading");
  assert.equal(skillWords(0.001), "no better than holding the last reading");
  assert.match(skillWords(null), /no comparison/);
});

test("table rows show figures only for verified bands", () => {
  const point = { bands: [
    { from_h: 0, to_h: 3, status: "verified", runs: 5, pairs: 60, model: { mae_m: 0.1, bias_m: -0.1 }, persistence: { mae_m: 0.2 }, skill_mae: 0.5, ensemble: null },
    { from_h: 3, to_h: 6, status: "not_yet_verified", runs: 1, pairs: 3, model: { mae_m: 0.3, bias_m: 0.3 }, persistence: { mae_m: 0.2 }, skill_mae: -0.5, ensemble: null },
  ] };
  const [a, b] = bandRows(point);
  assert.deepEqual([a.mae, a.bias, a.persistence, a.skill, a.status], ["0.10 m", "-0.10 m", "0.20 m", "50 %", "verified"]);
  assert.deepEqual([b.mae, b.skill, b.status], ["–", "–", "not yet verified"]);
});

test("level lines and crest line read the event scores", () => {
  const events = { events: 4, crests: 2, crest_stage_bias_m: -0.12, crest_stage_mae_m: 0.2, crest_timing_bias_h: 1.5, crest_timing_mae_h: 2,
    levels: [{ id: "minor", elevation_m: 11, hits: 2, false_alarms: 1, misses: 1, correct_negatives: 0, pod: 2 / 3, far: 1 / 3 }] };
  assert.equal(levelLines(events)[0], "minor (11.00 m): 2 hit, 1 false alarm, 1 missed, 0 correctly quiet; detected 67 %, false alarms 33 %");
  assert.equal(crestLine(events), "Crests of 2 observed runs: forecast 0.12 m too low on average (typical error 0.20 m), on average 1.5 h late.");
  assert.equal(crestLine({ events: 1, crests: 0 }), null);
  assert.deepEqual(levelLines({ events: 0, levels: [] }), []);
});

test("the correction says whether it is in use and why, and only an active one is drawn", () => {
  const on = { on: true, reason: "on: cut the RMSE", initial_error: 0.3, decay_per_hour: 0.8, stage: [1, 2] };
  assert.equal(correctionText(on, "m"), "Corrected at the gauge (dotted line): the gauge read +0.30 m against the model at issue time, 80 % of it kept per hour; cut the RMSE. Levels and warnings use the raw model.");
  const off = { on: false, reason: "off: no verified history at this point yet", initial_error: 0.3, decay_per_hour: null, stage: null };
  assert.equal(correctionText(off, "m"), "Correction at the gauge not in use: no verified history at this point yet.");
  assert.deepEqual(correctedStage({ corrected: on }), [1, 2]);
  assert.equal(correctedStage({ corrected: off }), null);
  assert.equal(correctedStage({}), null);
});
