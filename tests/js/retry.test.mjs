// Unit tests for the first-load back-off (static/js/retry.js).
import { test } from "node:test";
import assert from "node:assert/strict";

import { nextCheckMs } from "../../static/js/retry.js";

test("with a forecast shown the page polls at the normal interval", () => {
  assert.equal(nextCheckMs(0, 30_000), 30_000);
  assert.equal(nextCheckMs(0, 2_000), 2_000);
});

test("without a forecast it retries after 0.5 s, doubling each miss", () => {
  assert.deepEqual([1, 2, 3, 4, 5, 6].map((n) => nextCheckMs(n, 30_000)), [500, 1000, 2000, 4000, 8000, 16000]);
});

test("the back-off is capped at the poll interval", () => {
  assert.equal(nextCheckMs(7, 30_000), 30_000); // 32 s would pass the cap
  assert.equal(nextCheckMs(500, 30_000), 30_000);
  assert.equal(nextCheckMs(3, 1_500), 1_500);
  // The sum of the first five waits (0.5 + 1 + 2 + 4 + 8 s) is well under one 30 s poll.
  const total = [1, 2, 3, 4, 5].reduce((s, n) => s + nextCheckMs(n, 30_000), 0);
  assert.equal(total, 15_500);
});
