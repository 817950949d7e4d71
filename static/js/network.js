// A reach of several channels: the profile's channel choice and the flow
// split at each junction, as strings (pure; node tests).

/** The profile's choices: the main stem (value ""), then each channel. */
export function channelOptions(channels) {
  const stem = channels.filter((c) => c.main_stem).map((c) => c.name);
  return [{ value: "", label: `Main stem: ${stem.join(" → ")}` }, ...channels.map((c) => ({ value: c.name, label: c.name }))];
}

/** The index of the last time at or before `now` (the first if none is). */
export function indexAt(times, now) {
  const t = Date.parse(now);
  let k = 0;
  times.forEach((s, i) => {
    if (Date.parse(s) <= t) k = i;
  });
  return k;
}

/**
 * One row per channel end of a junction seen at `now`:
 * { channel, side, now, share, peak, peakTime } (discharge to 1 decimal,
 * share as a whole percent or "–").
 */
export function splitRows(j, now) {
  const k = indexAt(j.times, now);
  const pct = (s) => (s == null ? "–" : `${Math.round(100 * s)} %`);
  return j.ends.map((e) => ({
    channel: e.channel,
    side: e.side === "leaves" ? "leaves" : "arrives",
    now: (e.discharge[k] ?? NaN).toFixed(1),
    share: pct(e.share[k]),
    peak: e.peak_discharge.toFixed(1),
    peakTime: e.peak_time,
  }));
}
