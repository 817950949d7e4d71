// reachcast dashboard: small modules, no framework, no build step.
// Reads the forecast API, polls it with If-None-Match, and redraws only
// when an answer changed.

import { renderChart } from "./js/chart.js";
import { crossingRows } from "./js/crossings.js";
import { formatChainage, formatClock, formatDuration, formatFlow, formatLevel, formatTime, offsetLabel, offsetMinutes, toMs } from "./js/format.js";
import { profileRows, renderProfile } from "./js/profile.js";
import { channelOptions, splitRows } from "./js/network.js";
import { nextCheckMs } from "./js/retry.js";
import { clearance, levelSentence, levelsOf, levelWithId, pointStatus } from "./js/status.js";
import { $, h, HttpError, readBody } from "./js/dom.js";
import { serviceProblem } from "./js/service.js";
import { BAND, bandTraces, chanceLines, crestRangeText, defaultsNote, ensembleSummary, onlyInScenarios, percentileName, rangeNote } from "./js/ensemble.js";
import { loadUploads, wireForecaster } from "./js/forecaster.js";
import { hasRating, ratingChart, ratingLines } from "./js/rating.js";
import { bandRows, correctionText, crestLine, levelLines, skillChart, trackRecord } from "./js/verification.js";

const params = new URLSearchParams(location.search);
const POLL_MS = Math.max(1000, Number(params.get("poll")) || 30_000);
// /?view=briefing: the print layout on screen (static/briefing.css).
const BRIEFING = params.get("view") === "briefing";
// Charts are redrawn this wide for printing: A4 less 12 mm margins each
// side is 186 mm, 703 px at 96 px per inch.
const PRINT_CHART_PX = 700;

const state = {
  reaches: [],
  reachId: null,
  units: null, // null: the reach's preference
  forecast: null,
  forecastUrl: null,
  profile: null, // the longitudinal profile answer, or null: section hidden
  profileUrl: null,
  profileBrief: null, // the ensemble brief the profile was drawn with
  channel: null, // the profile's channel in a network; null: the main stem
  fetchedAt: 0, // local clock when `forecast` arrived
  etags: new Map(), // url -> { etag, body }
  timer: null,
  lastOk: 0,
  misses: 0, // checks in a row that found no forecast to show
};

/** GET with If-None-Match; returns { body, changed, at (local ms the body arrived) }. */
async function getJson(url) {
  const cached = state.etags.get(url);
  const headers = { Accept: "application/json" };
  if (cached) headers["If-None-Match"] = cached.etag;
  const res = await fetch(url, { headers, cache: "no-store" });
  if (res.status === 304 && cached) return { body: cached.body, changed: false, at: cached.at };
  const body = await readBody(res);
  if (!res.ok) throw new HttpError(res.status, body);
  const etag = res.headers.get("ETag");
  const at = Date.now();
  if (etag) state.etags.set(url, { etag, body, at });
  return { body, changed: true, at };
}

function currentReach() {
  return state.reaches.find((r) => r.id === state.reachId) || null;
}

function unitsWanted() {
  return state.units || currentReach()?.units || "si";
}

function forecastUrl() {
  // Always explicit: without it the server answers in the reach's own units.
  return `/api/reaches/${encodeURIComponent(state.reachId)}/forecast?units=${unitsWanted() === "us" ? "us" : "si"}`;
}

function profileUrl() {
  const channel = state.channel ? `&channel=${encodeURIComponent(state.channel)}` : "";
  return `/api/reaches/${encodeURIComponent(state.reachId)}/profile?units=${unitsWanted() === "us" ? "us" : "si"}${channel}`;
}

// ---------------------------------------------------------------- polling

async function refresh() {
  clearTimeout(state.timer);
  try {
    const { body } = await getJson("/api/reaches");
    state.reaches = body.reaches || [];
    renderReachPicker();
    if (!state.reachId || !currentReach()) {
      const wanted = new URLSearchParams(location.hash.slice(1)).get("reach");
      state.reachId = (state.reaches.find((r) => r.id === wanted) || state.reaches[0] || {}).id || null;
      renderReachPicker();
    }
    await refreshService();
    if (!state.reachId) {
      showNoForecast("No reach is configured on this server yet.");
    } else {
      await refreshForecast();
      if (state.forecast) await refreshProfile();
      await refreshVerification();
      await refreshRatings();
    }
    state.lastOk = Date.now();
    state.misses = state.forecast ? 0 : state.misses + 1;
    const zone = currentReach()?.time_zone;
    const again = state.misses ? `no forecast yet, checks again in ${nextCheckMs(state.misses, POLL_MS) / 1000} s` : `checks again every ${Math.round(POLL_MS / 1000)} s`;
    setConn(`Checked ${formatClock(Date.now(), zone)} (${offsetLabel(offsetMinutes(zone, Date.now()))}); ${again}.`, false);
  } catch (err) {
    if (!state.forecast) state.misses += 1;
    const since = state.lastOk ? ` Last successful check ${formatDuration((Date.now() - state.lastOk) / 1000)} ago; the figures below may be old.` : "";
    setConn(`Could not reach the server (${err.message}).${since}`, true);
  } finally {
    clearTimeout(state.timer); // an overlapping refresh may have set one
    // Soon while there is no forecast to show yet, then the normal interval.
    state.timer = setTimeout(refresh, nextCheckMs(state.misses, POLL_MS));
  }
}

/** Shows what /ready says when the service is not ready. */
async function refreshService() {
  const res = await fetch("/ready", { headers: { Accept: "application/json" }, cache: "no-store" });
  const body = await readBody(res);
  const text = serviceProblem(res.status, body);
  const box = document.getElementById("service-problem");
  box.hidden = !text;
  document.getElementById("service-problem-text").textContent = text || "";
}

async function refreshForecast() {
  const url = forecastUrl();
  let res;
  try {
    res = await getJson(url);
  } catch (err) {
    if (err instanceof HttpError && err.status === 404) {
      state.forecast = null;
      showNoForecast(`No forecast yet for this reach: ${err.message}`);
      return;
    }
    throw err;
  }
  // A 304 for another URL (the other units, another reach) still means
  // the page must show that URL's cached answer.
  if (res.changed || !state.forecast || state.forecastUrl !== url) {
    state.forecast = res.body;
    state.forecastUrl = url;
    state.fetchedAt = res.at;
    renderForecast();
  } else {
    renderFreshness(); // ages move on even when the forecast did not
  }
}

/**
 * The verification of the reach. On any failure the section says it
 * could not be read; the forecast above stays as it is.
 */
async function refreshVerification() {
  const url = `/api/reaches/${encodeURIComponent(state.reachId)}/verification`;
  try {
    const { body } = await getJson(url);
    renderVerification(body);
  } catch (err) {
    $("verification-body").replaceChildren(h("p", { class: "muted", text: `The verification could not be read (${err.message}).` }));
  }
}

function renderVerification(v) {
  const gauged = (v.points || []).filter((p) => p.status !== "no_gauge");
  const ungauged = (v.points || []).filter((p) => p.status === "no_gauge").map((p) => p.name);
  const parts = [h("p", { class: "muted", text: `Runs issued in the last ${v.days} days. A lead-time band is shown as verified once it has pairs from ${v.needs.runs} runs and ${v.needs.pairs} readings.` })];
  gauged.forEach((p, i) => parts.push(verificationPoint(p, i)));
  if (!gauged.length) parts.push(h("p", { text: "No point of interest on this reach has a gauge, so no forecast here can be verified." }));
  if (ungauged.length) parts.push(h("p", { class: "muted", text: `Not verified (no gauge at the point): ${ungauged.join(", ")}.` }));
  $("verification-body").replaceChildren(...parts);
}

function verificationPoint(p, i) {
  const titleId = `skill-title-${i}`;
  const rows = bandRows(p).map((r) =>
    h("tr", { class: r.status === "verified" ? "" : "muted" },
      h("th", { scope: "row", text: r.band }),
      ...[r.runs, r.pairs, r.mae, r.bias, r.persistence, r.skill, r.crps].map((t) => h("td", { class: "num", text: t })),
      h("td", { text: r.status })),
  );
  const head = ["Lead time", "Runs", "Readings", "Typical error (MAE)", "Bias", "Holding last reading (MAE)", "Skill", "Scenario CRPS", "Status"];
  const table = h("table", { class: "verify-table" },
    h("caption", { text: `${p.name}: forecasts against gauge ${p.gauge}, by lead time` }),
    h("thead", {}, h("tr", {}, ...head.map((t) => h("th", { scope: "col", text: t })))),
    h("tbody", {}, ...rows));
  const lines = levelLines(p.events);
  const crest = crestLine(p.events);
  return h("section", { class: "verify-point", "data-point": p.name },
    h("h3", { text: `${p.name}: ${p.status_text}` }),
    h("div", { class: "chart-box" }, skillChart(document, p, { titleId })),
    h("div", { class: "table-wrap" }, table),
    crest ? h("p", { text: crest }) : null,
    lines.length ? h("ul", { class: "level-record" }, ...lines.map((t) => h("li", { text: t }))) : h("p", { class: "muted", text: "No run's whole window has been observed yet: no crest or level record." }),
  );
}

/**
 * The ratings of the current reach's gauges that have one. On any failure
 * the section says it could not be read; the rest of the page stays.
 */
async function refreshRatings() {
  const reach = state.reachId;
  try {
    const { body } = await getJson("/api/gauges");
    const gauges = (Array.isArray(body) ? body : []).filter((g) => g.reach === reach);
    const rated = [];
    for (const g of gauges) {
      const base = `/api/gauges/${encodeURIComponent(g.id)}`;
      const ratings = (await getJson(`${base}/ratings`)).body;
      if (!hasRating(ratings)) continue;
      const gaugings = (await getJson(`${base}/gaugings`)).body.gaugings || [];
      rated.push({ gauge: g, ratings, gaugings });
    }
    if (reach === state.reachId) renderRatings(rated);
  } catch (err) {
    $("ratings-body").replaceChildren(h("p", { class: "muted", text: `The ratings could not be read (${err.message}).` }));
  }
}

function renderRatings(rated) {
  if (!rated.length) {
    $("ratings-body").replaceChildren(h("p", { class: "muted", text: "No gauge on this reach has a rating curve." }));
    return;
  }
  const now = Date.now();
  const zone = currentReach()?.time_zone;
  const at = (t) => formatTime(t, zone);
  $("ratings-body").replaceChildren(...rated.map(({ gauge, ratings, gaugings }, i) =>
    h("section", { class: "rating-gauge", "data-gauge": gauge.id },
      h("h3", { text: gauge.name }),
      h("div", { class: "chart-box" }, ratingChart(document, { name: gauge.name, ratings, gaugings, now, titleId: `rating-title-${i}` })),
      h("ul", { class: "rating-lines" }, ...ratingLines(ratings, gaugings, now, at).map((t) => h("li", { text: t }))))));
}

/**
 * The profile beside the forecast, through the same ETag cache. Without
 * one (404 before the first run, or a server without the endpoint) or on
 * any failure the section is emptied, which hides it; the forecast above
 * stays as it is.
 */
async function refreshProfile() {
  const url = profileUrl();
  let res;
  try {
    res = await getJson(url);
  } catch {
    clearProfile();
    // A channel the reach no longer has: back to its main stem.
    if (state.channel) {
      state.channel = null;
      return refreshProfile();
    }
    return;
  }
  if (!Array.isArray(res.body?.nodes) || !res.body.nodes.length) {
    clearProfile();
    return;
  }
  // The profile's scenario note follows the forecast's ensemble brief,
  // which can change (pending to failed) while the profile does not.
  const brief = JSON.stringify(state.forecast?.run?.ensemble ?? null);
  if (res.changed || !state.profile || state.profileUrl !== url || state.profileBrief !== brief) {
    state.profile = res.body;
    state.profileUrl = url;
    state.profileBrief = brief;
    renderProfileSection();
  }
}

function clearProfile() {
  state.profile = null;
  state.profileUrl = null;
  $("profile").replaceChildren();
}

function setConn(text, bad) {
  const c = $("conn");
  c.textContent = text;
  c.classList.toggle("bad", bad);
  // Announce losing the server, not every routine check.
  if (bad) c.setAttribute("role", "alert");
  else c.removeAttribute("role");
}

function showNoForecast(text) {
  state.forecast = null;
  const p = $("no-forecast");
  p.textContent = text;
  p.hidden = false;
  $("overview-body").replaceChildren();
  $("summary").textContent = "";
  $("data-age").hidden = true;
  $("charts").replaceChildren();
  $("stale").hidden = true;
  clearProfile();
}

// ---------------------------------------------------------------- rendering

function renderReachPicker() {
  const sel = $("reach-select");
  const ids = state.reaches.map((r) => r.id).join("\n");
  if (sel.dataset.ids !== ids) {
    sel.replaceChildren(...state.reaches.map((r) => h("option", { value: r.id, text: r.name })));
    sel.dataset.ids = ids;
  }
  if (state.reachId) sel.value = state.reachId;
  $("reach-pick").hidden = state.reaches.length < 2;
  const r = currentReach();
  $("reach-title").textContent = r ? r.name : "";
  if (r) $("briefing-link").href = `${BRIEFING ? "/" : "/?view=briefing"}#reach=${encodeURIComponent(r.id)}`;
  const u = unitsWanted();
  $("units-si").checked = u === "si";
  $("units-us").checked = u === "us";
}

function renderForecast() {
  const f = state.forecast;
  const zone = f.reach.time_zone;
  $("no-forecast").hidden = true;
  $("reach-title").textContent = f.reach.name;
  document.title = `${f.reach.name} · reachcast`;
  renderOverview(f, zone);
  renderFreshness();
  renderCharts(f, zone);
}

function renderOverview(f, zone) {
  const u = f.units;
  const rows = f.points.map((p, i) => {
    const st = pointStatus(p, f.now);
    const status = h(
      "span",
      { class: `status status-${st.state}` },
      h("span", { class: "icon", "aria-hidden": "true", text: st.icon }),
      ` ${st.text}`,
    );
    if (st.severity) status.append(h("span", { class: "sev", text: ` (${st.severity})` }));
    const top = p.highest_exceeded ? levelWithId(p, p.highest_exceeded_id, p.highest_exceeded) : null;
    const highest = top
      ? h("span", {}, `${top.name} `, h("span", { class: "muted", text: `${formatLevel(top.elevation, u.elevation)}, ${top.severity}` }))
      : h("span", { class: "muted", text: levelsOf(p).length ? "none" : "–" });
    const sentences = levelsOf(p).map((l) => levelSentence(l, f.now, zone)).filter(Boolean);
    const crossing = sentences.length
      ? h("span", { class: "when" }, ...sentences.flatMap((t, k) => (k ? [h("br"), t] : [t])))
      : h("span", { class: "muted", text: "none expected" });
    const clear = [];
    const lc = clearance(p.low_chord_margin, u.elevation);
    const dk = clearance(p.deck_margin, u.elevation);
    if (lc) clear.push(h("span", { class: lc.flag ? "flag" : "" }, lc.flag ? h("span", { "aria-hidden": "true", text: "▲ " }) : null, `low chord: ${lc.text}`));
    if (dk) clear.push(h("span", { class: dk.flag ? "flag" : "" }, dk.flag ? h("span", { "aria-hidden": "true", text: "▲ " }) : null, `deck: ${dk.text}`));
    const clearCell = clear.length ? h("span", {}, ...clear.flatMap((c, k) => (k ? [h("br"), c] : [c]))) : h("span", { class: "muted", text: "–" });
    const kind = p.kind.replace("_", " ");
    return h(
      "tr",
      { "data-point": p.name, class: `row-${st.state}` },
      h("th", { scope: "row", "data-label": "Point" }, h("a", { href: `#chart-${i}`, text: p.name }), h("br"), h("span", { class: "muted", text: `${kind} · ${formatChainage(p.chainage, u.stage)}` })),
      h("td", { "data-label": "Status" }, status, staleMark(f)),
      h("td", { "data-label": "Stage now", class: "num", text: formatLevel(p.current_stage, u.stage) }),
      h("td", { "data-label": "Forecast crest" }, h("span", { class: "num", text: formatLevel(p.crest_stage, u.stage) }), h("br"), h("span", { class: "muted", text: formatTime(p.crest_time, zone) })),
      h("td", { "data-label": "Highest level reached" }, highest),
      h("td", { "data-label": "When" }, crossing),
      h("td", { "data-label": "Bridge clearance" }, clearCell),
      h("td", { "data-label": "Chance in scenarios", class: "chances" }, chanceCell(p, f, zone)),
    );
  });
  $("overview-body").replaceChildren(...rows);
  renderSummary(f, zone);
  const note = ensembleSummary(f.run.ensemble);
  $("ensemble-note").textContent = note || "";
  $("ensemble-note").hidden = !note;
  $("overview-caption").textContent = `Points of interest on ${f.reach.name}, upstream first. Times in ${zone}.`;
}

/**
 * Per level, how many scenarios reach it and when; a level only the
 * scenarios (or only the model run) reach says so in bold.
 */
function chanceCell(p, f, zone) {
  const lines = chanceLines(p, f.run.ensemble, f.now, zone, f.run.started_at);
  if (!lines.length) return h("span", { class: "muted", text: "–" });
  const els = lines.map((l) =>
    h("span", { class: l.note ? "chance chance-differs" : "chance", "data-level": l.id }, l.text, ...(l.note ? ["; ", h("strong", { class: "only-note", text: l.note })] : [])),
  );
  return h("span", {}, ...els);
}

/** On each row of a stale forecast: the word, not colour alone. */
function staleMark(f) {
  if (!f.freshness?.stale) return null;
  return h("span", { class: "row-stale" }, h("br"), h("strong", { class: "stale-mark", text: "stale data" }), " (may be out of date)");
}

/** One sentence for a glance: what is over now, and the next crossing. */
function renderSummary(f, zone) {
  const st = f.points.map((p) => [p, pointStatus(p, f.now)]);
  const over = st.filter(([, s]) => s.state === "over").map(([p]) => p.name);
  let next = null;
  for (const [p, s] of st) if (s.next && (!next || s.next.at < next.at)) next = { ...s.next, point: p.name };
  const parts = [];
  if (over.length) parts.push(`Over a level now: ${over.length} of ${f.points.length} points (${over.join(", ")}).`);
  if (next) parts.push(`Next crossing: ${next.name} at ${next.point} in ${formatDuration(next.inSeconds)}, ${formatTime(next.at, zone)}.`);
  if (!parts.length) parts.push("All points clear: the forecast crosses no level.");
  const only = onlyInScenarios(f.points, f.run.ensemble, f.run.started_at);
  if (only) parts.push(only);
  const box = $("summary");
  box.textContent = parts.join(" ");
  box.className = `summary ${over.length ? "summary-over" : next ? "summary-rising" : "summary-clear"}`;
}

function renderFreshness() {
  const f = state.forecast;
  if (!f) return;
  const zone = f.reach.time_zone;
  const drift = (Date.now() - state.fetchedAt) / 1000;
  const run = f.run;
  const fr = f.freshness;
  $("f-run").replaceChildren(
    h("span", { id: "run-id", "data-run": run.id, text: `#${run.id}` }),
    `, finished ${formatTime(run.finished_at, zone)} (${formatDuration(fr.run_age_s + drift)} ago)`,
  );
  $("f-reading").textContent = fr.last_reading_at
    ? `${formatTime(fr.last_reading_at, zone)} (${formatDuration((fr.last_reading_age_s ?? 0) + drift)} old; counted stale after ${formatDuration(fr.stale_after_s)})`
    : "no reading from the upstream gauge";
  $("f-method").textContent = `${run.method} routing, reach version ${run.reach_version}`;
  const inf = run.inflow || {};
  const src = {
    upload: `uploaded inflow, version ${inf.upload_version ?? "?"}`,
    persistence: "last reading held steady (persistence)",
    recession: "recession from the last reading",
  }[inf.source_beyond_now] || inf.source_beyond_now || "–";
  $("f-inputs").textContent = inf.observed_to ? `${src}; observed to ${formatTime(inf.observed_to, zone)}` : src;
  const notes = [...(inf.warnings || []), ...(run.diagnostics?.warnings || [])];
  $("f-notes").replaceChildren(...(notes.length ? [h("ul", {}, ...notes.map((n) => h("li", { text: n })))] : ["none"]));

  renderDataAge(run, fr, drift);
  const stale = $("stale");
  stale.hidden = !fr.stale;
  $("stale-reasons").replaceChildren(...(fr.reasons || []).map((r) => h("li", { text: r })));
  const fail = f.last_failure;
  $("failure").hidden = !fail;
  if (fail) $("failure-text").textContent = `Run #${fail.run_id} at ${formatTime(fail.at, zone)}: ${fail.error}`;
}

/** The ages that matter at a glance, at the top of the page. */
function renderDataAge(run, fr, drift) {
  const reading = fr.last_reading_at ? `newest upstream reading ${formatDuration((fr.last_reading_age_s ?? 0) + drift)} old` : "no upstream reading";
  const box = $("data-age");
  box.replaceChildren(
    ...(fr.stale ? [h("strong", { class: "stale-mark", text: "Stale data" }), " "] : []),
    `Run #${run.id} finished ${formatDuration(fr.run_age_s + drift)} ago · ${reading}.`,
  );
  box.classList.toggle("is-stale", !!fr.stale);
  box.hidden = false;
}

function renderCharts(f, zone, printWidth) {
  const box = $("charts");
  const width = printWidth || Math.min(Math.max((box.clientWidth || 720) - 2, 280), 1400);
  const sections = f.points.map((p, i) => {
    const titleId = `chart-title-${i}`;
    const st = pointStatus(p, f.now);
    const range = rangeNote(f.run.ensemble, p.ensemble?.stage, p.ensemble?.members, p.ensemble?.failed_members);
    const crests = range?.state === "ready" ? crestRangeText(p.ensemble.crest, f.units.stage) : null;
    const svg = renderChart(document, p, {
      zone,
      units: f.units,
      now: f.now,
      width,
      titleId,
      title: `Stage at ${p.name}: now ${formatLevel(p.current_stage, f.units.stage)}, forecast crest ${formatLevel(p.crest_stage, f.units.stage)} at ${formatTime(p.crest_time, zone)}; ${st.text}${crests ? `; ${crests}` : ""}.`,
    });
    return h(
      "section",
      { class: "point", id: `chart-${i}`, "aria-labelledby": `chart-h-${i}` },
      h("h3", { id: `chart-h-${i}`, text: p.name }),
      h("p", { class: "muted", text: `Crest ${formatLevel(p.crest_stage, f.units.stage)} at ${formatTime(p.crest_time, zone)};${lowChordText(p, f.units.elevation)} peak discharge ${formatFlow(p.peak_discharge, f.units.discharge)}${crests ? `; ${crests}` : ""}.` }),
      rangeParagraph(range, f.run.ensemble),
      h("p", { class: "track-record", text: trackRecord(p.verification) }),
      p.corrected ? h("p", { class: "correction-note", text: correctionText(p.corrected, f.units.stage) }) : null,
      h("div", { class: "chart-box" }, svg),
      legend(p, range),
      dataTable(p, f, zone),
    );
  });
  box.replaceChildren(...sections);
}

/**
 * Above a chart (or the profile): why there is no band (pending, failed),
 * scenarios left out, and the caution when the spreads are defaults.
 * Null when there is nothing to say.
 */
function rangeParagraph(range, brief) {
  const parts = [];
  if (range && range.state !== "ready") parts.push(h("strong", { class: `range-state range-${range.state}`, text: `Scenario ${range.text}.` }));
  else if (range && range.text !== range.label) parts.push(`Scenario range ${range.text}.`);
  const caution = range ? defaultsNote(brief) : null;
  if (caution) parts.push(h("span", { class: "defaults-note", text: caution }));
  if (!parts.length) return null;
  return h("p", { class: "range-note" }, ...parts.flatMap((e, k) => (k ? [" ", e] : [e])));
}

/** " low chord 51.64 m, 0.05 m to spare;" for a bridge, else "". */
function lowChordText(p, unit) {
  const lc = clearance(p.low_chord_margin, unit);
  return p.low_chord == null || !lc ? "" : ` low chord ${formatLevel(p.low_chord, unit)}, ${lc.text};`;
}

function swatch(kind) {
  const ns = "http://www.w3.org/2000/svg";
  const s = document.createElementNS(ns, "svg");
  s.setAttribute("width", "28");
  s.setAttribute("height", "12");
  s.setAttribute("aria-hidden", "true");
  const add = (name, attrs) => {
    const e = document.createElementNS(ns, name);
    for (const [k, v] of Object.entries(attrs)) e.setAttribute(k, v);
    s.append(e);
  };
  if (kind === "observed") add("line", { x1: 0, x2: 28, y1: 6, y2: 6, stroke: "#1d2733", "stroke-width": 2.5 });
  if (kind === "forecast") add("line", { x1: 0, x2: 28, y1: 6, y2: 6, stroke: "#b03a12", "stroke-width": 2.5, "stroke-dasharray": "8 5" });
  if (kind === "corrected") add("line", { x1: 0, x2: 28, y1: 6, y2: 6, stroke: "#1f4a1a", "stroke-width": 2, "stroke-dasharray": "2 3" });
  if (kind === "threshold") add("line", { x1: 0, x2: 28, y1: 6, y2: 6, stroke: "#8a5a00", "stroke-width": 1.25 });
  if (kind === "structure") add("line", { x1: 0, x2: 28, y1: 6, y2: 6, stroke: "#4d5b6a", "stroke-width": 2 });
  if (kind === "now") add("line", { x1: 14, x2: 14, y1: 0, y2: 12, stroke: "#1f4f8a", "stroke-width": 2 });
  if (kind === "crossing") {
    add("circle", { cx: 7, cy: 6, r: 3.5, fill: "#1d2733", stroke: "#1d2733", "stroke-width": 1.5 });
    add("circle", { cx: 21, cy: 6, r: 3.5, fill: "#ffffff", stroke: "#1d2733", "stroke-width": 1.5 });
  }
  if (kind === "crest") add("path", { d: "M14,0l6,6l-6,6l-6,-6z", fill: "#b03a12" });
  if (kind === "band") add("rect", { x: 0.5, y: 1.5, width: 27, height: 9, fill: BAND.fill, stroke: BAND.edge, "stroke-width": 1 });
  if (kind === "median") add("line", { x1: 0, x2: 28, y1: 6, y2: 6, stroke: BAND.median, "stroke-width": 1.75, "stroke-dasharray": BAND.medianDash });
  return s;
}

function legend(p, range) {
  const band = range?.state === "ready" ? bandTraces(p.ensemble?.stage) : null;
  const items = [
    (p.observed || []).length ? ["observed", "observed stage (solid)"] : null,
    ["forecast", "model stage (dashed)"],
    p.corrected?.on ? ["corrected", "model corrected at the gauge (dotted)"] : null,
    band ? ["band", `${range.label} (shaded)`] : null,
    band?.mid ? ["median", `${percentileName(band.mid.percentile)} of the scenarios (short dashes)`] : null,
    levelsOf(p).some((l) => !l.kind || l.kind === "threshold") ? ["threshold", "threshold"] : null,
    p.low_chord != null || p.deck != null ? ["structure", "low chord / deck"] : null,
    ["now", "now"],
    ["crest", "forecast crest"],
    levelsOf(p).some((l) => l.exceeded) ? ["crossing", "rises above (●) / back below (○) a level"] : null,
  ].filter(Boolean);
  return h("ul", { class: "legend", "aria-label": "Chart key" }, ...items.map(([k, t]) => h("li", {}, swatch(k), ` ${t}`)));
}

function dataTable(p, f, zone) {
  const u = f.units;
  const rows = new Map();
  const traces = p.ensemble?.stage || [];
  (p.times || []).forEach((t, k) => rows.set(toMs(t), { t, stage: p.stage[k], q: p.discharge?.[k], obs: null, pct: traces.map((tr) => tr.stage[k]) }));
  for (const o of p.observed || []) {
    const ms = toMs(o.time);
    const r = rows.get(ms) || { t: o.time, stage: null, q: null, obs: null };
    r.obs = o.stage;
    rows.set(ms, r);
  }
  const nowMs = toMs(f.now);
  const body = [...rows.entries()]
    .sort((a, b) => a[0] - b[0])
    .map(([ms, r]) =>
      h(
        "tr",
        { class: ms > nowMs ? "future" : null },
        h("td", { text: formatTime(r.t, zone) }),
        h("td", { class: "num", text: r.obs == null ? "–" : r.obs.toFixed(2) }),
        h("td", { class: "num", text: r.stage == null ? "–" : r.stage.toFixed(2) }),
        ...traces.map((_, j) => h("td", { class: "num", text: r.pct?.[j] == null ? "–" : r.pct[j].toFixed(2) })),
        h("td", { class: "num", text: r.q == null ? "–" : formatFlow(r.q, u.discharge).split(" ")[0] }),
        h("td", { text: ms > nowMs ? "forecast" : "past" }),
      ),
    );
  return h(
    "details",
    { class: "data" },
    h("summary", { text: `Data table for ${p.name} (${rows.size} times)` }),
    h(
      "div",
      { class: "table-wrap" },
      h(
        "table",
        {},
        h("caption", { text: `Stage and discharge at ${p.name}; times in ${zone}` }),
        h(
          "thead",
          {},
          h("tr", {}, ...[`Time`, `Observed (${u.stage})`, `Model (${u.stage})`, ...traces.map((tr) => `Scenarios ${percentileName(tr.percentile)} (${u.stage})`), `Discharge (${u.discharge.replace("3/s", "³/s")})`, "Part"].map((c) => h("th", { scope: "col", text: c }))),
        ),
        h("tbody", {}, ...body),
      ),
    ),
    crossingTable(p, f, zone),
  );
}

/** When the forecast rises above and falls back below each level. */
function crossingTable(p, f, zone) {
  const rows = crossingRows(levelsOf(p), zone);
  const caption = h("caption", { text: `Level crossings at ${p.name}; times in ${zone}` });
  if (!rows.length) return h("p", { class: "muted crossings-none", text: `No level crossed at ${p.name} from now on.` });
  const head = ["Level", `Elevation (${f.units.elevation})`, "Above from", "Back below"].map((c) => h("th", { scope: "col", text: c }));
  const body = rows.map((r) =>
    h("tr", { "data-level": r.id }, h("th", { scope: "row", text: r.name }), h("td", { class: "num", text: r.elevation.toFixed(2) }), h("td", { text: r.above }), h("td", { text: r.below })),
  );
  return h("div", { class: "table-wrap" }, h("table", { class: "crossings" }, caption, h("thead", {}, h("tr", {}, ...head)), h("tbody", {}, ...body)));
}

// ---------------------------------------------------------------- profile

/** The longitudinal profile: heading, chart, key and its data table. */
function renderProfileSection(printWidth) {
  const d = state.profile;
  if (!d) return;
  const box = $("profile");
  const width = printWidth || Math.min(Math.max((box.clientWidth || $("charts").clientWidth || 720) - 2, 280), 1400);
  const zone = state.forecast?.reach.time_zone;
  const brief = state.forecast?.run?.ensemble;
  const range = rangeNote(brief, d.highest_percentiles, brief?.members_used, brief?.failed_members);
  const svg = renderProfile(document, d, {
    width,
    titleId: "profile-title",
    title: `Longitudinal profile of ${d.reach_name}${d.channel ? ` (${d.channel})` : ""}, upstream to downstream: bed, bank tops, water surface now and the highest forecast water surface${range?.state === "ready" ? `, with ${range.label}' highest water surface shaded` : ""}, run #${d.run_id}.`,
  });
  box.replaceChildren(
    h("h2", { id: "profile-h", text: "Longitudinal profile" }),
    h(
      "p",
      { class: "muted" },
      ...(d.freshness?.stale ? [h("strong", { class: "stale-mark", text: "stale data" }), " (may be out of date). "] : []),
      `Run #${d.run_id}, issued ${formatTime(d.issued_at, zone)}. Elevations in ${d.units.elevation}; upstream at the left.`,
    ),
    channelPicker(d),
    rangeParagraph(range, brief),
    h("div", { class: "chart-box" }, svg),
    profileLegend(d, range),
    profileTable(d),
    ...(state.forecast?.junctions || []).map((j) => splitTable(j, state.forecast)),
  );
}

/** In a network, the channel the profile draws (absent for one channel). */
function channelPicker(d) {
  if (!d.channels?.length) return null;
  const select = h("select", { id: "profile-channel" }, ...channelOptions(d.channels).map((o) => h("option", { value: o.value, selected: o.value === (state.channel || ""), text: o.label })));
  select.addEventListener("change", (e) => {
    state.channel = e.target.value || null;
    refreshProfile();
  });
  return h("p", {}, h("label", { for: "profile-channel", text: "Channel drawn " }), select);
}

/** The flow split at a junction of a network, now and at each end's peak. */
function splitTable(j, f) {
  const q = f.units.discharge.replace("3/s", "³/s");
  const rows = splitRows(j, f.now).map((r) =>
    h("tr", { "data-channel": r.channel }, h("th", { scope: "row", text: r.channel }), h("td", { text: r.side }), ...[r.now, r.share, r.peak].map((t) => h("td", { class: "num", text: t })), h("td", { text: formatTime(r.peakTime, f.reach.time_zone) })),
  );
  const head = ["Channel", "Flow", `Now (${q})`, "Share now", `Peak (${q})`, "Peak at"];
  return h(
    "div",
    { class: "table-wrap" },
    h("table", { class: "split-table", "data-junction": j.name }, h("caption", { text: `Flow split at ${j.name} (share of the flow through it)` }), h("thead", {}, h("tr", {}, ...head.map((c) => h("th", { scope: "col", text: c })))), h("tbody", {}, ...rows)),
  );
}

function profileLegend(d, range) {
  const band = range?.state === "ready" ? bandTraces(d.highest_percentiles) : null;
  const line = (attrs) => {
    const s = swatch("none");
    const e = document.createElementNS("http://www.w3.org/2000/svg", "line");
    for (const [k, v] of Object.entries({ x1: 0, x2: 28, y1: 6, y2: 6, ...attrs })) e.setAttribute(k, v);
    s.append(e);
    return s;
  };
  const items = [
    [line({ stroke: "#6b5b40", "stroke-width": 6 }), "bed (filled)"],
    (d.banks || []).some((b) => b.left_top != null || b.right_top != null) ? [line({ stroke: "#4d5b6a", "stroke-width": 1.5, "stroke-dasharray": "6 3" }), "left bank top (dashed) / right (dotted)"] : null,
    [line({ stroke: "#1f4f8a", "stroke-width": 2 }), "water surface now (solid)"],
    [line({ stroke: "#b03a12", "stroke-width": 2.5, "stroke-dasharray": "8 5" }), "highest forecast water surface (dashed)"],
    band ? [swatch("band"), `${range.label}: their highest water surface (shaded)`] : null,
    band?.mid ? [swatch("median"), `${percentileName(band.mid.percentile)} of it (short dashes)`] : null,
    (d.points || []).some((p) => p.low_chord != null) ? [line({ stroke: "#9aa5b1", "stroke-width": 8 }), "bridge, low chord to deck"] : null,
    [line({ x1: 7, x2: 21, stroke: "#8a5a00", "stroke-width": 2 }), "threshold at a point"],
  ].filter(Boolean);
  return h("ul", { class: "legend", "aria-label": "Profile key" }, ...items.map(([s, t]) => h("li", {}, s, ` ${t}`)));
}

function profileTable(d) {
  const u = d.units.elevation;
  const band = bandTraces(d.highest_percentiles);
  const rows = profileRows(d, u).map((r) =>
    h("tr", { "data-point": r.name }, h("th", { scope: "row", text: r.name }), ...[r.chainage, r.bed, r.now, r.highest, ...(band ? [r.range] : []), r.lowChord, r.deck, r.room].map((t) => h("td", { class: "num", text: t }))),
  );
  const head = ["Point", "Chainage", `Bed (${u})`, `Stage now (${u})`, `Highest forecast (${u})`, ...(band ? [`Highest in scenarios, ${percentileName(band.lo.percentile)}–${percentileName(band.hi.percentile)} (${u})`] : []), `Low chord (${u})`, `Deck (${u})`, "Room under the low chord at the highest"];
  return h(
    "details",
    { class: "data" },
    h("summary", { text: `Data table for the profile (${rows.length} ${rows.length === 1 ? "point" : "points"})` }),
    h(
      "div",
      { class: "table-wrap" },
      h("table", { class: "profile-table" }, h("caption", { text: `Longitudinal profile of ${d.reach_name} at the points of interest, upstream first` }), h("thead", {}, h("tr", {}, ...head.map((c) => h("th", { scope: "col", text: c })))), h("tbody", {}, ...rows)),
    ),
  );
}

/** The briefing view and printing: one stylesheet serves both. */
function setupBriefing() {
  if (BRIEFING) {
    $("briefing-css").media = "all";
    document.documentElement.classList.add("briefing");
    $("briefing-link").textContent = "Full dashboard";
  }
  $("print-briefing").addEventListener("click", () => window.print());
  // Drawn at the paper's width, chart text prints at its normal size.
  const redraw = (width) => {
    if (state.forecast) renderCharts(state.forecast, state.forecast.reach.time_zone, width);
    renderProfileSection(width);
  };
  window.addEventListener("beforeprint", () => redraw(PRINT_CHART_PX));
  window.addEventListener("afterprint", () => redraw());
}

// ---------------------------------------------------------------- wiring

function wire() {
  $("reach-select").addEventListener("change", (e) => {
    state.reachId = e.target.value;
    state.units = null;
    state.channel = null;
    history.replaceState(null, "", `#reach=${encodeURIComponent(state.reachId)}`);
    refresh();
    loadUploads();
  });
  for (const id of ["units-si", "units-us"]) {
    $(id).addEventListener("change", (e) => {
      state.units = e.target.value;
      refresh();
    });
  }
  $("controls").addEventListener("submit", (e) => e.preventDefault());
  wireForecaster({ reachId: () => state.reachId, zone: () => currentReach()?.time_zone, refresh });
  let resizeTimer = null;
  let lastWidth = $("charts").clientWidth;
  window.addEventListener("resize", () => {
    clearTimeout(resizeTimer);
    resizeTimer = setTimeout(() => {
      const w = $("charts").clientWidth;
      if (state.forecast && w !== lastWidth) {
        lastWidth = w;
        renderCharts(state.forecast, state.forecast.reach.time_zone);
        renderProfileSection();
      }
    }, 150);
  });
}

setupBriefing();
wire();
refresh();
