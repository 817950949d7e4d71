// What the page says about the service's own health, from GET /ready. Pure.
//
// /ready answers 503 with a problem document whose `detail` says what is
// wrong (database writes failing, the disk under its floor, the clock set
// back, a stopped scheduler). The page repeats it, since new readings may
// not be getting in and the forecasts shown may be getting old.

/** The notice for a /ready answer, or null when the service is ready. */
export function serviceProblem(status, body) {
  if (status >= 200 && status < 300) return null;
  const detail = body && typeof body.detail === "string" ? body.detail : `it answered ${status}`;
  return `The forecast service reports a problem: ${detail}. New readings may not be getting in, so the forecasts below may be getting old; follow official warnings.`;
}
