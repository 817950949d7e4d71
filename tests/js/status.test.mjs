// Unit tests for the overview's status wording (static/js/status.js).
import { test } from "node:test";
import assert from "node:assert/strict";

import { clearance, levelSentence, pointStatus } from "../../static/js/status.js";

const now = "2026-03-14T12:00:00Z";
const th = (name, elevation, o = {}) => ({
  name, elevation, severity: "minor", exceeded: false, above_now: false,
  first_above: null, back_below: null, duration_above_s: 0, margin: 1, ...o,
});

test("no thresholds says so", () => {
  assert.equal(pointStatus({ thresholds: [] }, now).state, "none");
});

test("a forecast below every threshold is clear", () => {
  const s = pointStatus({ thresholds: [th("a", 10), th("b", 11)] }, now);
  assert.equal(s.state, "clear");
  assert.equal(s.icon, "✓");
  assert.equal(s.next, null);
});

test("a crossing ahead names the highest threshold reached and the first crossing time", () => {
  const s = pointStatus({
    thresholds: [
      th("road awash", 10, { exceeded: true, first_above: "2026-03-14T15:00:00Z", severity: "minor" }),
      th("close the lane", 11, { exceeded: true, first_above: "2026-03-14T18:30:00Z", severity: "moderate" }),
      th("never", 12),
    ],
  }, now);
  assert.equal(s.state, "rising");
  assert.equal(s.text, "rising to close the lane");
  assert.equal(s.severity, "moderate");
  assert.equal(s.next.name, "road awash");
  assert.equal(s.next.inSeconds, 3 * 3600);
});

test("above a threshold now, and rising to a higher one", () => {
  const s = pointStatus({
    thresholds: [
      th("toe wet", 10, { exceeded: true, above_now: true, first_above: "2026-03-14T09:00:00Z" }),
      th("half height", 11, { exceeded: true, first_above: "2026-03-14T13:00:00Z", severity: "severe" }),
    ],
  }, now);
  assert.equal(s.state, "over");
  assert.equal(s.text, "over toe wet, rising to half height");
  assert.equal(s.severity, "severe");
  assert.equal(s.next.name, "half height");
});

test("clearance wording flags a crest above a low chord", () => {
  assert.deepEqual(clearance(0.42, "m"), { flag: false, text: "0.42 m to spare" });
  assert.deepEqual(clearance(-0.3, "ft"), { flag: true, text: "crest 0.30 ft above" });
  assert.equal(clearance(null, "m"), null);
});

// Level sentences: the planner's questions answered in words (times on the
// reach's clock; 2026-03-14 is a Saturday).
const lvl = (kind, name, o = {}) => ({ ...th(name, 10, o), kind, id: kind === "threshold" ? name : kind });

test("the low chord is reached in a stated time, with its reopening", () => {
  const l = lvl("low_chord", "low chord", {
    exceeded: true, first_above: "2026-03-14T15:10:00Z", back_below: "2026-03-15T02:10:00Z",
  });
  assert.equal(levelSentence(l, now, "UTC"), "reaches the low chord in 3 h 10 min (Sat 15:10), back below Sun 02:10");
  assert.equal(pointStatus({ levels: [l] }, now).text, "rising to the low chord");
});

test("the deck is under water from … to …", () => {
  const l = lvl("deck", "deck", { exceeded: true, first_above: "2026-03-14T14:20:00Z", back_below: "2026-03-14T20:05:00Z" });
  assert.equal(levelSentence(l, now, "+01:00"), "deck under water from Sat 15:20 to Sat 21:05");
});

test("above now says since when, from the look-back, and until when", () => {
  const l = lvl("threshold", "road awash", {
    exceeded: true, above_now: true, first_above: now, above_since: "2026-03-14T09:10:00Z", back_below: "2026-03-14T18:40:00Z",
  });
  assert.equal(levelSentence(l, now, "UTC"), "above road awash since Sat 09:10, until Sat 18:40");
  const old = { ...l, above_since: "2026-03-13T12:00:00Z", above_since_start: true, back_below: null };
  assert.equal(levelSentence(old, now, "UTC"), "above road awash since before Fri 12:00, to the end of the forecast");
  assert.equal(levelSentence(lvl("threshold", "never"), now, "UTC"), null);
});

test("runs stored before levels still read their thresholds", () => {
  const s = pointStatus({ thresholds: [th("a", 10, { exceeded: true, first_above: "2026-03-14T13:00:00Z" })] }, now);
  assert.equal(s.text, "rising to a");
});
