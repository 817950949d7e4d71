// Times, durations and numbers for the dashboard. Pure functions, no DOM.
//
// Times are shown on the reach's wall clock with its UTC offset always
// visible, e.g. "Sat 14 Mar 20:30 (+01:00)". The zone is an IANA name or a
// fixed "±hh:mm" offset; fixed offsets are handled here because not every
// browser's Intl accepts them as a timeZone.

const FIXED = /^([+-])(\d{2}):?(\d{2})$/;
const DAYS = ["Sun", "Mon", "Tue", "Wed", "Thu", "Fri", "Sat"];
const MONTHS = ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"];
export const MINUTE = 60_000;
export const HOUR = 3_600_000;

const offsetFormatters = new Map();

function offsetFormatter(zone) {
  let f = offsetFormatters.get(zone);
  if (f === undefined) {
    try {
      f = new Intl.DateTimeFormat("en-US", { timeZone: zone, timeZoneName: "longOffset" });
    } catch {
      f = null; // unknown zone: fall back to UTC, labelled as such
    }
    offsetFormatters.set(zone, f);
  }
  return f;
}

/** True when `zone` is usable (a fixed offset, UTC, or a zone Intl knows). */
export function zoneKnown(zone) {
  if (!zone || zone === "UTC" || zone === "Z" || FIXED.test(zone)) return true;
  return offsetFormatter(zone) !== null;
}

/** UTC offset of `zone` at instant `ms`, in minutes east of UTC. */
export function offsetMinutes(zone, ms) {
  if (!zone || zone === "UTC" || zone === "Z") return 0;
  const m = FIXED.exec(zone);
  if (m) return (m[1] === "-" ? -1 : 1) * (Number(m[2]) * 60 + Number(m[3]));
  const f = offsetFormatter(zone);
  if (!f) return 0;
  const name = f.formatToParts(new Date(ms)).find((p) => p.type === "timeZoneName")?.value ?? "GMT";
  const o = /GMT([+-])(\d{1,2})(?::?(\d{2}))?/.exec(name);
  if (!o) return 0;
  return (o[1] === "-" ? -1 : 1) * (Number(o[2]) * 60 + Number(o[3] ?? 0));
}

/** "+01:00", "-05:30", "+00:00". */
export function offsetLabel(minutes) {
  const sign = minutes < 0 ? "-" : "+";
  const a = Math.abs(minutes);
  return `${sign}${pad(Math.floor(a / 60))}:${pad(a % 60)}`;
}

const pad = (n) => String(n).padStart(2, "0");

/** Parses an RFC 3339 string (or passes a number through) to epoch ms. */
export function toMs(t) {
  if (typeof t === "number") return t;
  if (t == null) return NaN;
  return Date.parse(t);
}

/** The wall clock of `zone` at instant `t`. */
export function wallClock(t, zone) {
  const ms = toMs(t);
  const off = offsetMinutes(zone, ms);
  const d = new Date(ms + off * MINUTE);
  return {
    year: d.getUTCFullYear(),
    month: d.getUTCMonth(),
    day: d.getUTCDate(),
    weekday: d.getUTCDay(),
    hour: d.getUTCHours(),
    minute: d.getUTCMinutes(),
    offset: off,
  };
}

/** "Sat 14 Mar 20:30 (+01:00)"; "–" for a missing time. */
export function formatTime(t, zone) {
  const ms = toMs(t);
  if (!Number.isFinite(ms)) return "–";
  const w = wallClock(ms, zone);
  return `${DAYS[w.weekday]} ${w.day} ${MONTHS[w.month]} ${pad(w.hour)}:${pad(w.minute)} (${offsetLabel(w.offset)})`;
}

/** "20:30" on the zone's clock. */
export function formatClock(t, zone) {
  const w = wallClock(t, zone);
  return `${pad(w.hour)}:${pad(w.minute)}`;
}

/** "Sat 14 Mar" on the zone's clock. */
export function formatDay(t, zone) {
  const w = wallClock(t, zone);
  return `${DAYS[w.weekday]} ${w.day} ${MONTHS[w.month]}`;
}

/** "2 d 4 h", "3 h 15 min", "45 min", "under 1 min". Seconds in, sign ignored. */
export function formatDuration(seconds) {
  if (!Number.isFinite(seconds)) return "–";
  let m = Math.round(Math.abs(seconds) / 60);
  if (m < 1) return "under 1 min";
  const d = Math.floor(m / 1440);
  m -= d * 1440;
  const h = Math.floor(m / 60);
  m -= h * 60;
  if (d > 0) return h > 0 ? `${d} d ${h} h` : `${d} d`;
  if (h > 0) return m > 0 ? `${h} h ${m} min` : `${h} h`;
  return `${m} min`;
}

/** A stage or elevation with its unit: "49.82 m". */
export function formatLevel(v, unit) {
  if (v == null || !Number.isFinite(v)) return "–";
  return `${v.toFixed(2)} ${unit}`;
}

/** A discharge with its unit, to three significant figures or whole units. */
export function formatFlow(v, unit) {
  if (v == null || !Number.isFinite(v)) return "–";
  const text = Math.abs(v) >= 100 ? v.toFixed(0) : v.toPrecision(3);
  return `${text} ${unit.replace("3/s", "³/s")}`;
}

/** Feet in a statute mile: exactly 5280 (NIST SP 811, appendix B). */
export const FT_PER_MILE = 5280;

/**
 * A chainage (distance along the reach) in the units the forecast came in:
 * metres ("m") are shown as kilometres, "km 6.2"; feet ("ft") as miles,
 * "mi 3.9", or under one mile in whole feet, "ft 2640".
 */
export function formatChainage(v, unit) {
  if (v == null || !Number.isFinite(v)) return "–";
  if (unit === "ft") return v < FT_PER_MILE ? `ft ${Math.round(v)}` : `mi ${(v / FT_PER_MILE).toFixed(1)}`;
  return `km ${(v / 1000).toFixed(1)}`;
}
