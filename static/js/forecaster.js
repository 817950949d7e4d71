// The forecaster panel: the key for this tab, the inflow upload, the run
// button and the list of uploads with their withdraw buttons. The page
// hands in what it owns (the reach shown, its time zone, a refresh).

import { $, h, HttpError, readBody } from "./dom.js";
import { formatTime } from "./format.js";

const KEY_SLOT = "reachcast.key";

/** What the page lends the panel; set once by `wireForecaster`. */
let ctx = { reachId: () => null, zone: () => undefined, refresh: async () => {} };

function key() {
  return sessionStorage.getItem(KEY_SLOT) || "";
}

function showKeyState() {
  $("key-state").textContent = key() ? "A key is set for this tab." : "No key set.";
}

async function call(method, url, { body, type } = {}) {
  const headers = { Accept: "application/json" };
  if (key()) headers.Authorization = `Bearer ${key()}`;
  if (type) headers["Content-Type"] = type;
  const res = await fetch(url, { method, headers, body, cache: "no-store" });
  const data = await readBody(res);
  if (!res.ok) throw new HttpError(res.status, data);
  return data;
}

function problemText(err) {
  if (err instanceof HttpError) {
    if (err.status === 401) return "The server did not accept the key (missing or unknown). Enter a forecaster key above.";
    if (err.status === 403) return "This key is not allowed to do that (a forecaster key is needed).";
    return `${err.message} (HTTP ${err.status})`;
  }
  return `Could not reach the server: ${err.message}`;
}

function busy(button, on) {
  button.disabled = on;
  button.setAttribute("aria-busy", on ? "true" : "false");
}

async function upload(ev) {
  ev.preventDefault();
  const btn = $("up-send");
  const out = $("up-result");
  $("up-errors").hidden = true;
  const reason = $("up-reason").value.trim();
  const csv = $("up-csv").value;
  if (!reason) {
    out.textContent = "Give a reason for the upload.";
    $("up-reason").focus();
    return;
  }
  busy(btn, true);
  out.textContent = "Uploading…";
  try {
    const url = `/api/reaches/${encodeURIComponent(ctx.reachId())}/inflows?reason=${encodeURIComponent(reason)}`;
    const r = await call("POST", url, { body: csv, type: "text/csv" });
    out.textContent = `Accepted: inflow version ${r.version} (${r.points} rows).`;
    loadUploads();
    if ($("up-run").checked) await runNow();
  } catch (err) {
    out.textContent = `Not accepted: ${problemText(err)}`;
    const errors = err instanceof HttpError ? err.problem?.errors : null;
    if (Array.isArray(errors) && errors.length) {
      $("up-errors-body").replaceChildren(
        ...errors.map((e) => h("tr", {}, h("td", { class: "num", text: e.row ?? "–" }), h("td", { text: e.field ?? "–" }), h("td", { text: e.message ?? "" }))),
      );
      $("up-errors").hidden = false;
    }
  } finally {
    busy(btn, false);
  }
}

async function runNow() {
  const btn = $("run-now");
  const out = $("run-result");
  busy(btn, true);
  out.textContent = "Running… (this waits for the run to finish)";
  try {
    const r = await call("POST", `/api/reaches/${encodeURIComponent(ctx.reachId())}/runs?wait=true`);
    out.textContent = r.status === "ok" ? `Run #${r.run_id} finished; the page now shows it.` : `Run #${r.run_id} failed: ${r.error ?? "no detail"}`;
    await ctx.refresh();
  } catch (err) {
    out.textContent = `Run not started: ${problemText(err)}`;
  } finally {
    busy(btn, false);
  }
}

export async function loadUploads() {
  if (!ctx.reachId()) return;
  const body = $("uploads-body");
  try {
    const r = await call("GET", `/api/reaches/${encodeURIComponent(ctx.reachId())}/inflows`);
    const zone = ctx.zone();
    const list = r.uploads || [];
    if (!list.length) {
      body.replaceChildren(h("tr", {}, h("td", { colspan: 6, class: "muted", text: "No uploads for this reach." })));
      return;
    }
    body.replaceChildren(
      ...list.map((u) => {
        const cell = h("td", {});
        if (u.withdrawn) cell.append("withdrawn");
        else cell.append(withdrawButton(u.version, cell));
        return h("tr", { "data-version": u.version }, h("td", { class: "num", text: `v${u.version}` }), h("td", { text: formatTime(u.uploaded_at, zone) }), h("td", { text: u.uploaded_by }), h("td", { text: u.reason }), h("td", { class: "num", text: u.points }), cell);
      }),
    );
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
        await call("POST", `/api/reaches/${encodeURIComponent(ctx.reachId())}/inflows/${version}/withdraw`);
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

/** Wires the panel's controls; `page` is { reachId(), zone(), refresh() }. */
export function wireForecaster(page) {
  ctx = page;
  $("key-form").addEventListener("submit", (e) => {
    e.preventDefault();
    const v = $("key-input").value.trim();
    if (v) sessionStorage.setItem(KEY_SLOT, v);
    $("key-input").value = "";
    showKeyState();
    loadUploads();
  });
  $("key-forget").addEventListener("click", () => {
    sessionStorage.removeItem(KEY_SLOT);
    showKeyState();
  });
  $("upload-form").addEventListener("submit", upload);
  $("up-file").addEventListener("change", async (e) => {
    const file = e.target.files?.[0];
    if (file) $("up-csv").value = await file.text();
  });
  $("run-now").addEventListener("click", runNow);
  $("uploads-refresh").addEventListener("click", loadUploads);
  $("forecaster").addEventListener("toggle", (e) => {
    if (e.target.open) loadUploads();
  });
  showKeyState();
}
