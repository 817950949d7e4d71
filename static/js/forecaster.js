// The forecaster panel: the key for this tab (checked when entered), the
// inflow upload (checked and previewed against the observed flow before it
// is sent), the download of the upload in force, the run button and the
// list of uploads. The page hands in what it owns (the reach shown, its
// time zone, a refresh).

import { $, h, HttpError, readBody } from "./dom.js";
import { formatTime } from "./format.js";
import { joinSentences, plainProblem, uploadRequest } from "./panel_text.js";
import { renderPreviewChart } from "./preview_chart.js";

const KEY_SLOT = "reachcast.key";

/** What the page lends the panel; set once by `wireForecaster`. */
let ctx = { reachId: () => null, zone: () => undefined, refresh: async () => {} };

/** The upload checked by the last preview, sent as it is on confirmation. */
let pending = null;

const reachPath = () => `/api/reaches/${encodeURIComponent(ctx.reachId())}`;

function key() {
  return sessionStorage.getItem(KEY_SLOT) || "";
}

async function call(method, url, { body, type, accept = "application/json" } = {}) {
  const headers = { Accept: accept };
  if (key()) headers.Authorization = `Bearer ${key()}`;
  if (type) headers["Content-Type"] = type;
  const res = await fetch(url, { method, headers, body, cache: "no-store" });
  if (res.ok && !accept.includes("json")) return res.text();
  const data = await readBody(res);
  if (!res.ok) throw new HttpError(res.status, data);
  return data;
}

function problemText(err, text = "") {
  if (err instanceof HttpError) return plainProblem(err.status, err.problem, text).summary;
  return `Could not reach the server: ${err.message}`;
}

function busy(button, on) {
  button.disabled = on;
  button.setAttribute("aria-busy", on ? "true" : "false");
}

// ---------------------------------------------------------------- key

/** Asks the server whose key this is, and says so. */
async function checkKey() {
  const out = $("key-state");
  if (!key()) {
    out.textContent = "No key set.";
    return;
  }
  out.textContent = "Checking the key…";
  try {
    const me = await call("GET", "/api/keys/self");
    out.textContent = `Key accepted: ${me.name} (${me.role}).`;
    out.dataset.state = "ok";
  } catch (err) {
    if (err instanceof HttpError && err.status === 401) sessionStorage.removeItem(KEY_SLOT);
    out.textContent = err instanceof HttpError && err.status === 401 ? "The server did not accept this key: check it and enter it again." : problemText(err);
    out.dataset.state = "bad";
  }
}

// ---------------------------------------------------------------- upload

function showRefusal(err, text) {
  $("up-result").textContent = `Not accepted: ${problemText(err, text)}`;
  const rows = err instanceof HttpError ? plainProblem(err.status, err.problem, text).rows : [];
  if (!rows.length) return;
  $("up-errors-body").replaceChildren(
    ...rows.map((r) => h("tr", {}, h("td", { class: "num", text: r.line ?? "–" }), h("td", { text: r.field ?? "–" }), h("td", { text: r.text }))),
  );
  $("up-errors").hidden = false;
}

function hidePreview() {
  pending = null;
  $("up-preview").hidden = true;
}

/** Step 1: the server checks the upload and previews the join (dry run). */
async function preview(ev) {
  ev.preventDefault();
  const btn = $("up-send");
  const out = $("up-result");
  $("up-errors").hidden = true;
  hidePreview();
  const reason = $("up-reason").value.trim();
  const text = $("up-csv").value;
  if (!reason) {
    out.textContent = "Give a reason for the upload.";
    $("up-reason").focus();
    return;
  }
  busy(btn, true);
  out.textContent = "Checking…";
  const req = uploadRequest(reason, text);
  try {
    const sep = req.query ? "&" : "";
    const r = await call("POST", `${reachPath()}/inflows?${req.query}${sep}dry_run=true`, { body: req.body, type: req.type });
    pending = req;
    await showPreview(r);
    out.textContent = `Checked: ${r.points} rows, nothing stored yet. Look at the join below, then confirm.`;
  } catch (err) {
    showRefusal(err, text);
  } finally {
    busy(btn, false);
  }
}

async function inForceSeries() {
  try {
    return (await call("GET", `${reachPath()}/inflows/current`)).series || [];
  } catch {
    return []; // none in force (404), or unreadable: draw without it
  }
}

async function showPreview(r) {
  const zone = ctx.zone();
  const when = (t) => formatTime(t, zone);
  const [main, caution] = joinSentences(r.join, when);
  if (r.caution) $("up-caution").textContent = r.caution;
  $("up-jump").textContent = main;
  $("up-jump-caution").textContent = caution || "";
  $("up-jump-caution").hidden = !caution;
  const lines = { observed: r.join?.observed, current: await inForceSeries(), next: r.series };
  $("up-chart").replaceChildren(renderPreviewChart(document, lines, r.join, zone, `New inflow against the observed flow and the upload in force. ${main}`));
  $("up-preview").hidden = false;
  $("up-confirm").focus();
}

/** Step 2: the hydrologist confirms; the same request is stored. */
async function confirmUpload() {
  if (!pending) return;
  const btn = $("up-confirm");
  const out = $("up-result");
  const text = $("up-csv").value;
  busy(btn, true);
  out.textContent = "Uploading…";
  try {
    const req = pending;
    const r = await call("POST", `${reachPath()}/inflows?${req.query}`, { body: req.body, type: req.type });
    hidePreview();
    out.textContent = `Accepted: inflow version ${r.version} (${r.points} rows).`;
    loadUploads();
    if ($("up-run").checked) await runNow();
  } catch (err) {
    showRefusal(err, text);
  } finally {
    busy(btn, false);
  }
}

/** The upload in force as CSV: into the box to revise, or saved as a file. */
async function fetchCurrent(toBox) {
  const out = $("up-result");
  try {
    const csv = await call("GET", `${reachPath()}/inflows/current?format=csv`, { accept: "text/csv" });
    if (toBox) {
      $("up-csv").value = csv;
      hidePreview();
      out.textContent = "The upload in force is in the box: revise it, give a reason and check it.";
      return;
    }
    const a = h("a", { href: URL.createObjectURL(new Blob([csv], { type: "text/csv" })), download: `${ctx.reachId()}-inflow-in-force.csv` });
    document.body.append(a);
    a.click();
    a.remove();
    out.textContent = "Downloaded the upload in force as CSV.";
  } catch (err) {
    out.textContent = err instanceof HttpError && err.status === 404 ? "No upload is in force for this reach." : problemText(err);
  }
}

// ---------------------------------------------------------------- runs and list

async function runNow() {
  const btn = $("run-now");
  const out = $("run-result");
  busy(btn, true);
  out.textContent = "Running… (this waits for the run to finish)";
  try {
    const r = await call("POST", `${reachPath()}/runs?wait=true`);
    out.textContent = r.status === "ok" ? `Run #${r.run_id} finished; the page now shows it.` : `Run #${r.run_id} failed: ${r.error ?? "no detail"}`;
    await ctx.refresh();
  } catch (err) {
    out.textContent = `Run not started: ${problemText(err)}`;
  } finally {
    busy(btn, false);
  }
}

function uploadRow(u, zone) {
  const cell = h("td", {});
  if (u.withdrawn) cell.append("withdrawn");
  else cell.append(withdrawButton(u.version, cell));
  const version = h("td", { class: "num" }, `v${u.version}`);
  if (u.in_force) version.append(h("br"), h("strong", { class: "in-force-mark", text: "in force" }));
  return h(
    "tr",
    { "data-version": u.version, "data-boundary": u.boundary, class: u.in_force ? "in-force" : null, "aria-current": u.in_force ? "true" : null },
    version,
    h("td", { text: formatTime(u.uploaded_at, zone) }),
    h("td", { text: u.uploaded_by_name ?? `key ${u.uploaded_by}` }),
    h("td", { text: u.boundary ? `${u.reason} (for the tributary ${u.boundary})` : u.reason }),
    h("td", { class: "num", text: u.points }),
    cell,
  );
}

export async function loadUploads() {
  if (!ctx.reachId()) return;
  const body = $("uploads-body");
  try {
    const r = await call("GET", `${reachPath()}/inflows`);
    const list = r.uploads || [];
    if (!list.length) {
      body.replaceChildren(h("tr", {}, h("td", { colspan: 6, class: "muted", text: "No uploads for this reach." })));
      return;
    }
    body.replaceChildren(...list.map((u) => uploadRow(u, ctx.zone())));
  } catch (err) {
    body.replaceChildren(h("tr", {}, h("td", { colspan: 6, text: problemText(err) })));
  }
}

function withdrawButton(version, cell) {
  const b = h("button", { type: "button", class: "withdraw", text: `Withdraw v${version}…` });
  b.addEventListener("click", () => {
    const yes = h("button", { type: "button", class: "danger", text: `Yes, withdraw v${version}` });
    const no = h("button", { type: "button", text: "Keep it" });
    no.addEventListener("click", () => {
      cell.replaceChildren(withdrawButton(version, cell));
      cell.querySelector("button")?.focus();
    });
    yes.addEventListener("click", async () => {
      busy(yes, true);
      try {
        await call("POST", `${reachPath()}/inflows/${version}/withdraw`);
        $("up-result").textContent = `Withdrew inflow version ${version}. Run the forecast to use the change.`;
        await loadUploads();
      } catch (err) {
        cell.replaceChildren(`Not withdrawn: ${problemText(err)}`);
      }
    });
    cell.replaceChildren(yes, " ", no);
    yes.focus();
  });
  return b;
}

// ---------------------------------------------------------------- wiring

/** Wires the panel's controls; `page` is { reachId(), zone(), refresh() }. */
export function wireForecaster(page) {
  ctx = page;
  $("key-form").addEventListener("submit", (e) => {
    e.preventDefault();
    const v = $("key-input").value.trim();
    if (v) sessionStorage.setItem(KEY_SLOT, v);
    $("key-input").value = "";
    checkKey();
    loadUploads();
  });
  $("key-forget").addEventListener("click", () => {
    sessionStorage.removeItem(KEY_SLOT);
    checkKey();
  });
  $("upload-form").addEventListener("submit", preview);
  $("up-confirm").addEventListener("click", confirmUpload);
  $("up-cancel").addEventListener("click", () => {
    hidePreview();
    $("up-result").textContent = "Not sent. Change the inflow and check it again.";
    $("up-csv").focus();
  });
  // An edit after the check makes the preview stale: check again.
  for (const id of ["up-csv", "up-reason"]) $(id).addEventListener("input", hidePreview);
  $("up-file").addEventListener("change", async (e) => {
    const file = e.target.files?.[0];
    if (file) $("up-csv").value = await file.text();
    hidePreview();
  });
  $("up-download").addEventListener("click", () => fetchCurrent(false));
  $("up-revise").addEventListener("click", () => fetchCurrent(true));
  $("run-now").addEventListener("click", runNow);
  $("uploads-refresh").addEventListener("click", loadUploads);
  $("forecaster").addEventListener("toggle", (e) => {
    if (e.target.open) loadUploads();
  });
  checkKey();
}
