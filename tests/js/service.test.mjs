// Unit tests for the service-health notice (static/js/service.js).
import { test } from "node:test";
import assert from "node:assert/strict";

import { serviceProblem } from "../../static/js/service.js";

test("a ready service shows no notice", () => {
  assert.equal(serviceProblem(200, { status: "ready" }), null);
});

test("a 503 repeats the server's detail with the caution", () => {
  const text = serviceProblem(503, { detail: "database writes are failing since 2026-12-03T14:00:00.000Z: database is locked" });
  assert.match(text, /database writes are failing since/);
  assert.match(text, /follow official warnings/);
});

test("an answer without a problem body still says something", () => {
  assert.match(serviceProblem(502, null), /answered 502/);
});
