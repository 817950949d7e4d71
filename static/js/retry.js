// When to ask again. Pure, no DOM.
//
// Until the page has a forecast to show (the service has just started and
// its first run has not landed), it asks again soon and backs off by
// doubling; once a forecast is shown it polls at the normal interval.

/** First quick retry after a load that found no forecast, in ms. */
export const FIRST_RETRY_MS = 500;

/**
 * Delay before the next check, in ms. `misses`: checks in a row that found
 * no forecast (0 once one is shown); `pollMs`: the normal poll interval,
 * which also caps the back-off. 0.5 s, 1 s, 2 s, 4 s, ... up to `pollMs`.
 */
export function nextCheckMs(misses, pollMs) {
  if (!(misses > 0)) return pollMs;
  const delay = FIRST_RETRY_MS * 2 ** Math.min(misses - 1, 30);
  return Math.min(delay, pollMs);
}
