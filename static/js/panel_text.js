// What the forecaster panel says about its text box. Pure functions:
// which line of the box each row the server numbers is on, and refusals
// in plain words naming the line and the field.
//
// The server numbers an upload's rows from 1 without the header (CSV) or
// as the elements of the series (JSON); people read line numbers in the
// box, header and comments counted. Both mappings follow the server's
// readers: for CSV a line starting with `#` and an empty line are skipped,
// a quoted value may run over several lines (RFC 4180).

/** "csv" or "json" for the text in the box (a JSON upload is an array). */
export function textKind(text) {
  return text.trimStart().startsWith("[") ? "json" : "csv";
}

/**
 * The request for the text in the box: CSV as it is (reason in the query),
 * a JSON list inside {"reason", "series"} on the same first line, so the
 * server's line numbers (JSON syntax errors) are the box's lines too.
 */
export function uploadRequest(reason, text) {
  if (textKind(text) === "json") {
    return { query: "", type: "application/json", body: `{"reason": ${JSON.stringify(reason)}, "series": ${text}}` };
  }
  return { query: `reason=${encodeURIComponent(reason)}`, type: "text/csv", body: text };
}

/** Lines (1-based) where each CSV record starts; [0] is the header's. */
export function csvRecordLines(text) {
  const lines = text.split(/\r\n|\n|\r/);
  const starts = [];
  let open = false; // inside a quoted value that runs over the line end
  lines.forEach((line, i) => {
    if (!open) {
      if (line.startsWith("#") || line.trim() === "") return;
      starts.push(i + 1);
    }
    const quotes = (line.match(/"/g) || []).length;
    if (quotes % 2 === 1) open = !open;
  });
  return starts;
}

/** Lines (1-based) where each element of a top-level JSON array starts. */
export function jsonElementLines(text) {
  const starts = [];
  let line = 1;
  let depth = 0;
  let inString = false;
  let escaped = false;
  let expecting = false; // at depth 1, after `[` or `,`
  for (const c of text) {
    if (c === "\n") line += 1;
    if (inString) {
      if (escaped) escaped = false;
      else if (c === "\\") escaped = true;
      else if (c === '"') inString = false;
      continue;
    }
    if (depth === 1 && expecting && !/\s/.test(c) && c !== "]") {
      starts.push(line);
      expecting = false;
    }
    if (c === '"') inString = true;
    else if (c === "[" || c === "{") {
      depth += 1;
      if (depth === 1) expecting = true;
    } else if (c === "]" || c === "}") depth -= 1;
    else if (c === "," && depth === 1) expecting = true;
  }
  return starts;
}

/** The box's line for the server's row `row` (1-based), or null. */
export function lineOfRow(text, row, kind = textKind(text)) {
  if (!(row >= 1)) return null;
  const lines = kind === "json" ? jsonElementLines(text) : csvRecordLines(text).slice(1);
  return lines[row - 1] ?? null;
}

const EXAMPLE_TIME = "2026-03-14T06:00:00Z";

/** One plain sentence for one refused row `{row, field, message}`. */
export function plainRowError(e, text, kind = textKind(text)) {
  const line = lineOfRow(text, e.row, kind);
  const where = line ? `Line ${line}` : "The inflow as a whole";
  const msg = String(e.message || "");
  let what;
  if (e.field === "time" && /increase/.test(msg)) what = "the time must be later than the time on the row before";
  else if (e.field === "time") what = `the time is not a date and time with a time zone, like ${EXAMPLE_TIME}`;
  else if (e.field === "discharge" && /negative/.test(msg)) what = "the discharge must not be below zero";
  else if (e.field === "discharge" && /finite/.test(msg)) what = "the discharge must be an ordinary number";
  else if (e.field === "discharge") what = "the discharge is missing or is not a number";
  else if (e.field === "series") what = "give at least two rows of values";
  else what = `${e.field || "a value"} is not right`;
  return { line, field: e.field ?? null, text: `${where}: ${what}.` };
}

/**
 * A refusal in plain words: { summary, rows: [{line, field, text}] } from
 * the HTTP status and the problem document (RFC 9457) the server sent.
 */
export function plainProblem(status, problem, text = "") {
  const p = problem || {};
  const kind = textKind(text);
  const rows = Array.isArray(p.errors) ? p.errors.map((e) => plainRowError(e, text, kind)) : [];
  if (status === 401) return { summary: "The server did not accept the key. Enter a forecaster key above.", rows };
  if (status === 403) return { summary: "This key may not do that: a forecaster key is needed.", rows };
  if (status === 413) return { summary: "The inflow is too long to send in one go.", rows };
  if (status === 429) return { summary: "Too many requests with this key just now; wait a moment and try again.", rows };
  if (rows.length) {
    const n = rows.length;
    return { summary: `${n === 1 ? "One row needs" : `${n} rows need`} correcting; nothing was stored.`, rows };
  }
  const type = String(p.type || "");
  if (type.endsWith("/malformed-json")) {
    const at = p.line ? ` near line ${p.line}` : "";
    return { summary: `The text could not be read as a list of values${at}: check the brackets, commas and quotes.`, rows };
  }
  if (type.endsWith("/malformed-csv")) {
    return { summary: "The text could not be read as a table: the first line must be the header time,discharge, then one row per time.", rows };
  }
  if (p.field === "reason") return { summary: "Give a reason for the upload, in 1 to 500 characters.", rows };
  if (p.field === "series") return { summary: "The inflow is too long: at most 50,000 rows.", rows };
  if (status === 404) return { summary: "The server does not know this reach or upload; reload the page.", rows };
  if (status >= 500) return { summary: "The server could not do this just now; try again in a moment.", rows };
  return { summary: p.detail || p.title || `The server refused it (HTTP ${status}).`, rows };
}

/** m³/s with a sign and up to three significant figures: "+10.0 m³/s". */
function signedFlow(v) {
  const text = Math.abs(v) >= 100 ? Math.abs(v).toFixed(0) : Math.abs(v).toPrecision(3);
  return `${v < 0 ? "−" : "+"}${text} m³/s`;
}

function flow(v) {
  return `${Math.abs(v) >= 100 ? v.toFixed(0) : v.toPrecision(3)} m³/s`;
}

/**
 * What a dry run's join means, in sentences: [main, caution?]. `when`
 * formats a time for the reader.
 */
export function joinSentences(join, when = (t) => t) {
  if (!join) return ["The server sent no preview."];
  if (!join.last_observed) {
    return ["There is no usable observed flow to join: the forecast would use this inflow alone."];
  }
  const obs = join.last_observed;
  if (!join.used || join.upload_at_join == null) {
    return [`The forecast would not use this inflow: it ends before the last observed flow (${flow(obs.discharge)} at ${when(obs.time)}).`];
  }
  const pct = (100 * (join.jump_relative ?? 0)).toFixed(1);
  const main = `Jump at the join: ${signedFlow(join.jump)} (${pct} %), from the observed ${flow(obs.discharge)} at ${when(obs.time)} to ${flow(join.upload_at_join)} in the new inflow.`;
  if ((join.jump_relative ?? 0) > join.warn_fraction) {
    return [main, `That is more than ${Math.round(100 * join.warn_fraction)} %: the forecast will step there. Check that the new inflow starts from the observed flow.`];
  }
  return [main];
}
