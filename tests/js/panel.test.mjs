// Unit tests for the forecaster panel's wording (static/js/panel_text.js):
// row-to-line mapping and plain-word refusals. Expected line numbers are
// counted by hand in the literal texts below.
import { test } from "node:test";
import assert from "node:assert/strict";

import { csvRecordLines, joinSentences, jsonElementLines, lineOfRow, plainProblem, textKind, uploadRequest } from "../../static/js/panel_text.js";

const csv = [
  "# storm revision", // line 1: comment
  "time,discharge", // 2: header
  "2026-03-14T06:00:00Z,10", // 3: row 1
  "", // 4: blank
  "yesterday,20", // 5: row 2
  '"2026-03-14T08:00:00Z",-3', // 6: row 3
].join("\n");

test("CSV rows map to the lines of the box, header and comments counted", () => {
  assert.deepEqual(csvRecordLines(csv), [2, 3, 5, 6]);
  assert.equal(lineOfRow(csv, 1), 3);
  assert.equal(lineOfRow(csv, 2), 5);
  assert.equal(lineOfRow(csv, 3), 6);
  assert.equal(lineOfRow(csv, 0), null, "row 0 is the whole series");
  assert.equal(lineOfRow(csv, 9), null);
});

test("a quoted value over two lines is one row (RFC 4180 §2.6)", () => {
  const t = 'time,discharge,note\n2026-03-14T06:00:00Z,1,"two\nlines"\n2026-03-14T07:00:00Z,x,\n';
  assert.equal(lineOfRow(t, 2), 4);
});

test("CRLF line ends count once", () => {
  assert.equal(lineOfRow("time,discharge\r\na,1\r\nb,2\r\n", 2), 3);
});

test("JSON elements map to the line each starts on", () => {
  const t = '[\n  {"time": "2026-03-14T06:00:00Z", "discharge": 1},\n  {"time": "a,[b", "discharge": 2},\n\n  {"time": "x",\n   "discharge": 3}\n]';
  assert.equal(textKind(t), "json");
  assert.deepEqual(jsonElementLines(t), [2, 3, 5]);
  assert.equal(lineOfRow(t, 3), 5);
});

test("refused rows become plain sentences naming the line", () => {
  const problem = {
    type: "/problems/invalid-value", field: "time", row: 2,
    errors: [
      { row: 2, field: "time", message: "`yesterday` is not an RFC 3339 time with an offset (input contains invalid characters)" },
      { row: 3, field: "discharge", message: "must not be negative, got -3" },
    ],
  };
  const p = plainProblem(422, problem, csv);
  assert.equal(p.summary, "2 rows need correcting; nothing was stored.");
  assert.deepEqual(p.rows.map((r) => r.line), [5, 6]);
  assert.match(p.rows[0].text, /^Line 5: the time is not a date and time/);
  assert.equal(p.rows[1].text, "Line 6: the discharge must not be below zero.");
  for (const r of p.rows) assert.doesNotMatch(r.text, /RFC|3339|offset|invalid characters|parse/i, "no parser jargon");
});

test("out-of-order times and too few rows are said plainly", () => {
  const t = "time,discharge\n2026-03-14T07:00:00Z,1\n2026-03-14T06:00:00Z,2\n";
  const p = plainProblem(422, { errors: [{ row: 2, field: "time", message: "times must increase strictly: a does not follow b" }] }, t);
  assert.equal(p.rows[0].text, "Line 3: the time must be later than the time on the row before.");
  const one = plainProblem(422, { errors: [{ row: 0, field: "series", message: "at least two samples are needed" }] }, "time,discharge\na,1\n");
  assert.equal(one.rows[0].text, "The inflow as a whole: give at least two rows of values.");
});

test("whole-body refusals and key problems", () => {
  assert.match(plainProblem(400, { type: "/problems/malformed-json", line: 4, column: 2 }, "[\n").summary, /near line 4/);
  assert.match(plainProblem(400, { type: "/problems/malformed-csv", detail: "the header must name…" }, "when,flow").summary, /header time,discharge/);
  assert.match(plainProblem(422, { field: "reason" }).summary, /reason/);
  assert.match(plainProblem(401, {}).summary, /key/);
  assert.match(plainProblem(403, {}).summary, /forecaster key/);
});

test("the join is stated in numbers, with a caution above the warning fraction", () => {
  const join = {
    used: true, last_observed: { time: "T", discharge: 140 }, upload_at_join: 150,
    jump: 10, jump_relative: 10 / 150, warn_fraction: 0.25,
  };
  // 10 / 150 = 6.67 % (hand arithmetic).
  assert.deepEqual(joinSentences(join), ["Jump at the join: +10.0 m³/s (6.7 %), from the observed 140 m³/s at T to 150 m³/s in the new inflow."]);
  const big = { ...join, upload_at_join: 300, jump: 160, jump_relative: 160 / 300 };
  const s = joinSentences(big);
  assert.match(s[0], /\+160 m³\/s \(53\.3 %\)/);
  assert.match(s[1], /more than 25 %/);
  assert.match(joinSentences({ ...join, used: false })[0], /would not use/);
  assert.match(joinSentences({ ...join, last_observed: null })[0], /no usable observed flow/);
});

test("a JSON list is sent inside {reason, series} without moving its lines", () => {
  const text = '[\n {"time": "2026-03-14T06:00:00Z", "discharge": 1},\n {"time": "2026-03-14T07:00:00Z", "discharge": 2}\n]';
  const r = uploadRequest('storm "B"\nrevised', text);
  assert.equal(r.type, "application/json");
  const body = JSON.parse(r.body);
  assert.equal(body.reason, 'storm "B"\nrevised');
  assert.equal(body.series.length, 2);
  assert.equal(r.body.split("\n").length, text.split("\n").length, "same number of lines");
  assert.deepEqual(r.body.split("\n").slice(1, -1), text.split("\n").slice(1, -1), "inner lines unchanged");
  assert.equal(r.body.split("\n").at(-1), "]}", "the last line only gains the closing brace");
  const csv = uploadRequest("a b", "time,discharge\n");
  assert.deepEqual([csv.type, csv.query, csv.body], ["text/csv", "reason=a%20b", "time,discharge\n"]);
});
