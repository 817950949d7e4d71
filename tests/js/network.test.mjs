// Unit tests for the network pieces of the dashboard (static/js/network.js).
// The invented junction: a main channel splitting into itself and a
// floodplain path; continuity at a junction (common practice) makes the
// leaving shares add up to 100 %.
import { test } from "node:test";
import assert from "node:assert/strict";

import { channelOptions, indexAt, splitRows } from "../../static/js/network.js";

const channels = [
  { name: "Upper", main_stem: true },
  { name: "Floodplain path", main_stem: false },
  { name: "Lower", main_stem: true },
];

test("the main stem comes first, named by its channels in flow order, then every channel", () => {
  const o = channelOptions(channels);
  assert.deepEqual(o[0], { value: "", label: "Main stem: Upper → Lower" });
  assert.deepEqual(o.slice(1).map((c) => c.value), ["Upper", "Floodplain path", "Lower"]);
});

const times = ["2026-03-14T00:00:00.000Z", "2026-03-14T00:15:00.000Z", "2026-03-14T00:30:00.000Z"];
const junction = {
  name: "Split",
  times,
  ends: [
    { channel: "Upper", side: "arrives", discharge: [10, 40, 20], share: [1, 1, 1], peak_discharge: 40, peak_time: times[1] },
    { channel: "Lower", side: "leaves", discharge: [10, 30, 16], share: [1, 0.75, 0.8], peak_discharge: 30, peak_time: times[1] },
    { channel: "Floodplain path", side: "leaves", discharge: [0, 10, 4], share: [0, 0.25, 0.2], peak_discharge: 10, peak_time: times[1] },
  ],
};

test("the split is read at the last output at or before now", () => {
  assert.equal(indexAt(times, "2026-03-14T00:20:00Z"), 1);
  assert.equal(indexAt(times, "2026-03-13T23:00:00Z"), 0);
  assert.equal(indexAt(times, "2026-03-15T00:00:00Z"), 2);
  const rows = splitRows(junction, "2026-03-14T00:20:00Z");
  assert.deepEqual(rows.map((r) => [r.channel, r.side, r.now, r.share]), [
    ["Upper", "arrives", "40.0", "100 %"],
    ["Lower", "leaves", "30.0", "75 %"],
    ["Floodplain path", "leaves", "10.0", "25 %"],
  ]);
  assert.equal(rows[2].peak, "10.0");
});

test("no flow through the junction gives no share", () => {
  const dry = { ...junction, ends: junction.ends.map((e) => ({ ...e, share: [null, null, null] })) };
  assert.equal(splitRows(dry, times[0])[1].share, "–");
});
