// Unit tests for chainage formatting (static/js/format.js).
import { test } from "node:test";
import assert from "node:assert/strict";

import { formatChainage } from "../../static/js/format.js";

// The international foot is exactly 0.3048 m and a statute mile exactly
// 5280 ft = 1609.344 m (NIST SP 811, appendix B). The API sends chainage
// in feet for units=us; these are metres converted the same way.
const ft = (m) => m / 0.3048;

test("metres are shown as kilometres with one decimal", () => {
  assert.equal(formatChainage(6200, "m"), "km 6.2");
  assert.equal(formatChainage(0, "m"), "km 0.0");
  assert.equal(formatChainage(16200, "m"), "km 16.2");
});

test("feet are shown as miles, not as feet / 1000", () => {
  assert.equal(formatChainage(ft(1609.344), "ft"), "mi 1.0"); // exactly one mile
  assert.equal(formatChainage(ft(6200), "ft"), "mi 3.9"); // 6200 m = 3.853 mi
  assert.equal(formatChainage(ft(16200), "ft"), "mi 10.1"); // 16200 m = 10.066 mi
});

test("under a mile, whole feet", () => {
  assert.equal(formatChainage(2640, "ft"), "ft 2640");
  assert.equal(formatChainage(ft(500), "ft"), "ft 1640"); // 500 m = 1640.42 ft
  assert.equal(formatChainage(0, "ft"), "ft 0");
  assert.equal(formatChainage(5279.4, "ft"), "ft 5279");
  assert.equal(formatChainage(null, "ft"), "–");
});
