// reachcast dashboard entry point: small modules, no framework, no build step.
const text = (id, value) => {
  const el = document.getElementById(id);
  if (el) el.textContent = value;
};

async function refreshService() {
  try {
    const res = await fetch("/ready", { headers: { Accept: "application/json" } });
    const body = await res.json();
    if (res.ok) {
      text("svc-status", "✔ ready");
      text("svc-db", body.database);
      text("svc-schema", `${body.migrations.applied} of ${body.migrations.known} migrations applied`);
    } else {
      text("svc-status", `✖ not ready: ${body.detail ?? res.status}`);
    }
  } catch (err) {
    text("svc-status", `✖ unreachable (${err.message})`);
  }
}

refreshService();
setInterval(refreshService, 30000);
