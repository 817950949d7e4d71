// Unit tests for the longitudinal profile's scales and geometry
// (static/js/profile.js). The invented reach: 10 km, bed falling 1 m/km.
import { test } from "node:test";
import assert from "node:assert/strict";

import { BRIDGE_HALF_PX, bedArea, bridgeBox, chainageUnit, profileElevations, profileLayout, profileRows, rangeAt, roomUnderLowChord, valueAt } from "../../static/js/profile.js";
import { linearScale } from "../../static/js/chart.js";

const nodes = [0, 2500, 5000, 7500, 10000].map((c) => ({ chainage: c, bed: 20 - c / 1000, stage_now: 21 - c / 1000, highest: 25 - c / 1000 + (c === 5000 ? 0.5 : 0), highest_time: "2026-03-14T18:00:00Z" }));
const bridge = { id: "marl-bridge", name: "Marl Bridge", kind: "bridge", chainage: 5000, bed: 15, stage_now: 16, highest: 20.5, low_chord: 19.5, deck: 20.5, levels: [{ id: "low", kind: "threshold", name: "low", elevation: 16 }] };
const data = { reach_name: "Test reach (invented)", units: { elevation: "m" }, nodes, banks: [{ chainage: 0, left_top: 23, right_top: null }], points: [bridge] };
const m = { top: 10, right: 10, bottom: 40, left: 50 };

test("a kilometre per axis unit in metres, a mile (5280 ft, NIST SP 811) in feet", () => {
  assert.equal(chainageUnit("m"), 1000);
  assert.equal(chainageUnit("ft"), 5280);
});

test("the vertical domain covers the bed, banks, water, envelope and every level", () => {
  const zs = profileElevations(data);
  assert.equal(Math.min(...zs), 10); // the bed at 10 km
  assert.equal(Math.max(...zs), 25); // the envelope upstream
  assert.ok(zs.includes(23) && zs.includes(19.5) && zs.includes(16), "bank top, low chord and threshold");
  assert.ok(!zs.includes(null), "a missing bank top is left out");
});

test("the layout maps the first node to the left edge, the last to the right, and up to smaller y", () => {
  const L = profileLayout(data, { width: 600, height: 300, m, unit: "m" });
  assert.equal(L.x(0), 50);
  assert.equal(L.x(10000), 590);
  assert.ok(L.y(25) < L.y(10), "higher water is nearer the top");
  assert.ok(Math.abs(L.y(L.yt.max) - 10) < 1e-9 && Math.abs(L.y(L.yt.min) - 260) < 1e-9, "the domain fills the plot");
  // Ticks on whole 1-2-5 steps of km, in metres of chainage, inside the reach.
  assert.ok(L.xTicks.length >= 2 && L.xTicks[0] === 0 && L.xTicks.at(-1) === 10000, JSON.stringify(L.xTicks));
  for (const t of L.xTicks) assert.ok(Number.isInteger(t / 1000) || Number.isInteger(t / 500), `${t}`);
});

test("in feet the ticks fall on miles", () => {
  const ft = { ...data, nodes: nodes.map((n) => ({ ...n, chainage: n.chainage / 0.3048 })) };
  const L = profileLayout(ft, { width: 600, height: 300, m, unit: "ft" });
  // 10 km is 6.21 mi: ticks at whole (1-2-5) steps of miles up to 6 mi.
  for (const t of L.xTicks) assert.ok(Math.abs(t / 5280 - Math.round(t / 5280)) < 1e-9, `${t} ft is a whole mile`);
  assert.ok(L.xTicks.at(-1) <= 10000 / 0.3048);
});

test("the bed is closed down to the plot's bottom for its fill", () => {
  const x = linearScale(0, 10000, 0, 100);
  const y = linearScale(10, 20, 100, 0);
  assert.equal(bedArea(nodes.slice(0, 2), x, y, 100), "M0.0,0.0L25.0,25.0L25.0,100.0L0.0,100.0Z");
  assert.equal(bedArea([], x, y, 100), "");
});

test("a bridge is a box from its low chord up to its deck, short along the reach", () => {
  const x = linearScale(0, 10000, 0, 1000);
  const y = linearScale(10, 30, 200, 0);
  const b = bridgeBox(bridge, x, y);
  assert.deepEqual(b, { x: 500 - BRIDGE_HALF_PX, y: y(20.5), width: 2 * BRIDGE_HALF_PX, height: y(19.5) - y(20.5) });
  assert.ok(b.height > 0);
  assert.equal(bridgeBox({ ...bridge, deck: null }, x, y), null);
});

test("values along a polyline interpolate linearly and are null outside", () => {
  const xs = nodes.map((n) => n.chainage);
  assert.equal(valueAt(xs, nodes.map((n) => n.bed), 3750), 16.25);
  assert.equal(valueAt(xs, nodes.map((n) => n.highest), 5000), 20.5);
  assert.equal(valueAt(xs, xs, 12000), null);
});

test("the table gives the room under the low chord at the highest, or the water above it", () => {
  assert.equal(roomUnderLowChord(bridge), -1);
  assert.equal(roomUnderLowChord({ low_chord: null, highest: 3 }), null);
  const [r] = profileRows(data, "m");
  assert.deepEqual(r, { id: "marl-bridge", name: "Marl Bridge", chainage: "km 5.0", bed: "15.00", now: "16.00", highest: "20.50", lowChord: "19.50", deck: "20.50", range: "–", room: "water 1.00 m above" });
  const [dry] = profileRows({ points: [{ ...bridge, highest: 19.2 }] }, "m");
  assert.equal(dry.room, "0.30 m below");
});

// The scenarios' highest water surface per node: p10 half a metre under
// the envelope, p90 half a metre over it, p50 on it.
const banded = { ...data, highest_percentiles: [90, 10, 50].map((q) => ({ percentile: q, stage: nodes.map((n) => n.highest + (q - 50) / 80) })) };

test("the scenarios' range widens the vertical domain to its lowest and highest percentile", () => {
  const zs = profileElevations(banded);
  assert.equal(Math.max(...zs), 25.5); // p90 upstream: 25 + 0.5
  assert.equal(Math.min(...zs), 10, "the bed still sets the bottom");
  assert.ok(zs.includes(14.5), "p10 at 10 km: 15 - 0.5");
  assert.deepEqual(profileElevations(data), profileElevations({ ...data, highest_percentiles: [] }), "no scenarios, no change");
});

test("the table gives the scenarios' highest at each point, interpolated between nodes", () => {
  // At 5 km (a node) the envelope is 20.5: p10 20.0, p90 21.0.
  assert.equal(rangeAt(banded, 5000), "20.00–21.00");
  // At 3750 m, halfway between nodes at 2500 m (22.5) and 5000 m (20.5):
  // envelope 21.5, so p10 21.0 and p90 22.0.
  assert.equal(rangeAt(banded, 3750), "21.00–22.00");
  assert.equal(rangeAt(banded, 12000), "–", "beyond the last node");
  assert.equal(rangeAt(data, 5000), "–", "no scenarios");
  assert.equal(profileRows(banded, "m")[0].range, "20.00–21.00");
});
