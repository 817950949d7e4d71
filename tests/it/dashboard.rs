//! Browser tests of the dashboard: the real server (demo reach on, port 0,
//! temporary data directory) driven through Debian's headless Chromium by
//! chromedriver over the W3C WebDriver protocol, spoken with the `reqwest`
//! client the other tests already use.
//!
//! Ignored by default because they need `chromium` and `chromium-driver`:
//!
//! ```sh
//! apt-get install -y --no-install-recommends chromium chromium-driver
//! cargo test --test it dashboard:: -- --include-ignored --test-threads=1
//! ```
//!
//! Nothing here sleeps to synchronise: every wait polls the page (or the
//! API) for a condition and fails with a message at a deadline. Screenshots
//! land in `target/dashboard-artifacts/`.

use std::{
    path::{Path, PathBuf},
    process::{Child, Command, Stdio},
    time::{Duration, Instant},
};

use crate::common::{
    ReachApp, TestApp, assert_success, bridge_reach,
    files::{demo_reach_json, repo_path},
    make_key, reach_gauge, spawn_app, spawn_app_with, test_config,
};
use base64::Engine as _;
use serde_json::{Value, json};

const INSTALL_HINT: &str = "install them with: apt-get install -y --no-install-recommends chromium chromium-driver \
     (or point CHROMIUM and CHROMEDRIVER at the binaries)";

/// One browser at a time: the machine has two cores.
static BROWSER: tokio::sync::Mutex<()> = tokio::sync::Mutex::const_new(());

const W3C_ELEMENT: &str = "element-6066-11e4-a52e-4f735466cecf";

/// Records uncaught errors, rejected promises and console.error calls from
/// the first script on, for `Browser::page_errors`.
const ERROR_HOOK: &str = r#"
window.__testErrors = [];
window.addEventListener('error', e => window.__testErrors.push('error: ' + (e.message || e.type) + ' ' + (e.filename || (e.target && (e.target.src || e.target.href)) || '')), true);
window.addEventListener('unhandledrejection', e => window.__testErrors.push('unhandled rejection: ' + (e.reason && (e.reason.stack || e.reason.message) || e.reason)));
document.addEventListener('securitypolicyviolation', e => window.__testErrors.push('CSP violation: ' + e.violatedDirective + ' ' + e.blockedURI));
(function () { const orig = console.error; console.error = function (...a) { window.__testErrors.push('console.error: ' + a.join(' ')); return orig.apply(this, a); }; })();
"#;

fn find_program(env: &str, names: &[&str]) -> PathBuf {
    if let Some(p) = std::env::var_os(env) {
        return PathBuf::from(p);
    }
    let path = std::env::var_os("PATH").unwrap_or_default();
    for dir in std::env::split_paths(&path) {
        for name in names {
            let candidate = dir.join(name);
            if candidate.is_file() {
                return candidate;
            }
        }
    }
    panic!(
        "{} not found on the PATH (looked for {}); {INSTALL_HINT}",
        names[0],
        names.join(", ")
    );
}

/// A chromedriver process and one headless Chromium session.
struct Browser {
    driver: Child,
    http: reqwest::Client,
    base: String,
    session: String,
    _profile: tempfile::TempDir,
}

impl Browser {
    async fn start() -> Browser {
        let chromium = find_program(
            "CHROMIUM",
            &["chromium", "chromium-browser", "google-chrome"],
        );
        let chromedriver = find_program("CHROMEDRIVER", &["chromedriver"]);
        let port = {
            let l = std::net::TcpListener::bind("127.0.0.1:0").expect("free port");
            l.local_addr().expect("port").port()
        };
        let driver = Command::new(&chromedriver)
            .arg(format!("--port={port}"))
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap_or_else(|e| panic!("start {}: {e}; {INSTALL_HINT}", chromedriver.display()));
        let http = reqwest::Client::new();
        let base = format!("http://127.0.0.1:{port}");
        let profile = tempfile::tempdir().expect("browser profile dir");
        let mut browser = Browser {
            driver,
            http,
            base,
            session: String::new(),
            _profile: profile,
        };
        // Wait for chromedriver to answer /status.
        let deadline = Instant::now() + Duration::from_secs(30);
        loop {
            let ready = match browser
                .http
                .get(format!("{}/status", browser.base))
                .send()
                .await
            {
                Ok(r) => r
                    .json::<Value>()
                    .await
                    .map(|v| v["value"]["ready"] == true)
                    .unwrap_or(false),
                Err(_) => false,
            };
            if ready {
                break;
            }
            assert!(
                Instant::now() < deadline,
                "chromedriver did not become ready in 30 s"
            );
            tokio::time::sleep(Duration::from_millis(50)).await; // poll interval
        }
        let args = vec![
            "--headless".to_owned(),
            "--disable-gpu".to_owned(),
            "--no-sandbox".to_owned(),
            "--disable-background-networking".to_owned(),
            "--disable-component-update".to_owned(),
            "--disable-sync".to_owned(),
            "--no-first-run".to_owned(),
            "--disable-quic".to_owned(),
            "--disable-dev-shm-usage".to_owned(),
            "--window-size=1280,1000".to_owned(),
            format!("--user-data-dir={}", browser._profile.path().display()),
        ];
        let caps = json!({"capabilities": {"alwaysMatch": {
            "browserName": "chrome",
            "goog:chromeOptions": {"binary": chromium.to_string_lossy(), "args": args},
            "goog:loggingPrefs": {"browser": "ALL"},
        }}});
        let v = browser.raw("POST", "/session", Some(caps)).await;
        browser.session = v["sessionId"]
            .as_str()
            .unwrap_or_else(|| panic!("no session id in {v}"))
            .to_owned();
        browser
            .cdp(
                "Page.addScriptToEvaluateOnNewDocument",
                json!({"source": ERROR_HOOK}),
            )
            .await;
        browser
    }

    async fn raw(&self, method: &str, path: &str, body: Option<Value>) -> Value {
        let url = format!("{}{}", self.base, path);
        let req = match method {
            "GET" => self.http.get(&url),
            "DELETE" => self.http.delete(&url),
            _ => self
                .http
                .post(&url)
                .json(&body.unwrap_or_else(|| json!({}))),
        };
        let res = req
            .send()
            .await
            .unwrap_or_else(|e| panic!("WebDriver {path}: {e}"));
        let status = res.status();
        let v: Value = res.json().await.expect("WebDriver answers JSON");
        assert!(
            status.is_success(),
            "WebDriver {method} {path} failed ({status}): {}",
            v["value"]
        );
        v["value"].clone()
    }

    async fn cmd(&self, method: &str, path: &str, body: Option<Value>) -> Value {
        let p = format!("/session/{}{}", self.session, path);
        self.raw(method, &p, body).await
    }

    async fn cdp(&self, cmd: &str, params: Value) -> Value {
        self.cmd(
            "POST",
            "/goog/cdp/execute",
            Some(json!({"cmd": cmd, "params": params})),
        )
        .await
    }

    async fn goto(&self, url: &str) {
        self.cmd("POST", "/url", Some(json!({"url": url}))).await;
    }

    /// Runs `script` (a function body; `arguments` holds `args`) in the page.
    async fn js(&self, script: &str, args: Value) -> Value {
        self.cmd(
            "POST",
            "/execute/sync",
            Some(json!({"script": script, "args": args})),
        )
        .await
    }

    /// Runs an async `script` whose last argument is the callback taking
    /// the result.
    async fn eval_async(&self, script: &str) -> Value {
        self.cmd(
            "POST",
            "/execute/async",
            Some(json!({"script": script, "args": []})),
        )
        .await
    }

    /// [`Browser::js`] without arguments.
    async fn eval(&self, script: &str) -> Value {
        self.js(script, json!([])).await
    }

    async fn find(&self, css: &str) -> String {
        let v = self
            .cmd(
                "POST",
                "/element",
                Some(json!({"using": "css selector", "value": css})),
            )
            .await;
        v[W3C_ELEMENT]
            .as_str()
            .unwrap_or_else(|| panic!("no element id for {css}: {v}"))
            .to_owned()
    }

    async fn click(&self, css: &str) {
        let id = self.find(css).await;
        self.cmd("POST", &format!("/element/{id}/click"), None)
            .await;
    }

    async fn type_into(&self, css: &str, text: &str) {
        let id = self.find(css).await;
        self.cmd("POST", &format!("/element/{id}/clear"), None)
            .await;
        self.cmd(
            "POST",
            &format!("/element/{id}/value"),
            Some(json!({"text": text})),
        )
        .await;
    }

    /// Sends key presses to whatever has focus (e.g. "\u{E004}" is Tab).
    async fn keys(&self, text: &str) {
        let actions: Vec<Value> = text
            .chars()
            .flat_map(|c| {
                [
                    json!({"type": "keyDown", "value": c.to_string()}),
                    json!({"type": "keyUp", "value": c.to_string()}),
                ]
            })
            .collect();
        self.cmd(
            "POST",
            "/actions",
            Some(json!({"actions": [{"type": "key", "id": "kbd", "actions": actions}]})),
        )
        .await;
    }

    async fn resize(&self, width: u32, height: u32) {
        self.cmd(
            "POST",
            "/window/rect",
            Some(json!({"width": width, "height": height})),
        )
        .await;
    }

    /// Polls `script` until it returns a truthy value; returns that value.
    async fn wait_for(&self, what: &str, script: &str, secs: u64) -> Value {
        let deadline = Instant::now() + Duration::from_secs(secs);
        loop {
            let v = self.eval(script).await;
            let truthy = match &v {
                Value::Null => false,
                Value::Bool(b) => *b,
                Value::String(s) => !s.is_empty(),
                Value::Number(n) => n.as_f64() != Some(0.0),
                _ => true,
            };
            if truthy {
                return v;
            }
            if Instant::now() > deadline {
                let body = self
                    .eval("return document.body ? document.body.innerText.slice(0, 3000) : ''")
                    .await;
                panic!(
                    "timed out after {secs} s waiting for {what}; page text:\n{}",
                    body.as_str().unwrap_or("")
                );
            }
            tokio::time::sleep(Duration::from_millis(100)).await; // poll interval
        }
    }

    async fn screenshot(&self, name: &str, element: Option<&str>) -> PathBuf {
        let v = match element {
            Some(css) => {
                // Element screenshots are clipped to the viewport: make the
                // window tall enough and put the element just under the
                // sticky caution banner so the banner does not cover it.
                let need = self
                    .js(
                        "const e = document.querySelector(arguments[0]); return Math.ceil(e.getBoundingClientRect().height + document.getElementById('caution').offsetHeight + 40)",
                        json!([css]),
                    )
                    .await
                    .as_u64()
                    .unwrap_or(800);
                let width = self
                    .eval("return window.outerWidth")
                    .await
                    .as_u64()
                    .unwrap_or(1280);
                let height = self
                    .eval("return window.outerHeight")
                    .await
                    .as_u64()
                    .unwrap_or(1000);
                if need + 120 > height {
                    self.resize(width as u32, (need + 160) as u32).await;
                }
                self.js(
                    "const e = document.querySelector(arguments[0]); window.scrollTo(0, e.getBoundingClientRect().top + window.scrollY - document.getElementById('caution').offsetHeight - 8)",
                    json!([css]),
                )
                .await;
                let id = self.find(css).await;
                self.cmd("GET", &format!("/element/{id}/screenshot"), None)
                    .await
            }
            None => self.cmd("GET", "/screenshot", None).await,
        };
        let png = base64::engine::general_purpose::STANDARD
            .decode(v.as_str().expect("base64 screenshot"))
            .expect("valid base64");
        assert!(png.starts_with(b"\x89PNG"), "a PNG screenshot");
        let dir = artifacts_dir();
        std::fs::create_dir_all(&dir).expect("artifacts dir");
        let path = dir.join(name);
        std::fs::write(&path, png).expect("write screenshot");
        path
    }

    /// Errors the page recorded plus SEVERE browser-log entries, except
    /// those matching one of `allowed` (expected, e.g. a 422 the test caused).
    async fn page_errors(&self, allowed: &[&str]) -> Vec<String> {
        let mut out: Vec<String> = Vec::new();
        let hooked = self.eval("return window.__testErrors || []").await;
        for e in hooked.as_array().into_iter().flatten() {
            out.push(e.as_str().unwrap_or_default().to_owned());
        }
        let logs = self
            .cmd("POST", "/se/log", Some(json!({"type": "browser"})))
            .await;
        for entry in logs.as_array().into_iter().flatten() {
            if entry["level"] == "SEVERE" {
                out.push(format!(
                    "log: {}",
                    entry["message"].as_str().unwrap_or_default()
                ));
            }
        }
        out.retain(|m| !allowed.iter().any(|a| m.contains(a)));
        out
    }
}

impl Drop for Browser {
    fn drop(&mut self) {
        // Closing the session ends Chromium; then end the driver we started.
        if !self.session.is_empty() {
            let url = format!("{}/session/{}", self.base, self.session);
            let _ = std::thread::spawn(move || {
                let rt = tokio::runtime::Builder::new_current_thread()
                    .enable_all()
                    .build();
                if let Ok(rt) = rt {
                    rt.block_on(async {
                        let _ = reqwest::Client::new()
                            .delete(url)
                            .timeout(Duration::from_secs(10))
                            .send()
                            .await;
                    });
                }
            })
            .join();
        }
        let _ = self.driver.kill();
        let _ = self.driver.wait();
    }
}

fn artifacts_dir() -> PathBuf {
    repo_path("target/dashboard-artifacts")
}

/// The demo app with the given tweaks, plus a forecaster key.
async fn demo_app(
    dir: &Path,
    tweak: impl FnOnce(&mut reachcast::config::Config),
) -> (TestApp, String) {
    let key = make_key(dir, "forecaster", &[]).await;
    let mut config = test_config(dir);
    config.demo.enabled = true;
    tweak(&mut config);
    (spawn_app_with(config).await, key)
}

/// Replays a demo reading only hourly, so no new run changes the figures
/// while a test compares the page with the API.
fn quiet_replay(c: &mut reachcast::config::Config) {
    c.demo.replay_secs = 3600;
}

/// Waits until the API serves a forecast for the demo reach, asking for a
/// run if none has appeared yet. Returns the forecast.
async fn wait_for_forecast(app: &TestApp, key: &str) -> Value {
    let deadline = Instant::now() + Duration::from_secs(180);
    let mut asked = false;
    loop {
        let res = app.get("/api/reaches/brindlemoor/forecast").await;
        if res.status() == 200 {
            return res.json().await.expect("forecast JSON");
        }
        if !asked {
            let run = app.run_and_wait(key, "brindlemoor").await;
            asked = run.status().is_success();
        }
        assert!(
            Instant::now() < deadline,
            "the demo reach has no forecast after 180 s (last status {})",
            res.status()
        );
        tokio::time::sleep(Duration::from_millis(250)).await; // poll interval
    }
}

/// The API's current forecast at `path`, once the page shows the same run.
async fn settle_on_latest_run(app: &TestApp, b: &Browser, path: &str) -> Value {
    let deadline = Instant::now() + Duration::from_secs(60);
    loop {
        let (status, f) = app.get_json(path).await;
        assert_eq!(status, 200, "{f}");
        let id = f["run"]["id"].as_i64().expect("run id");
        let shown = b
            .wait_for(
                "the page to show a run",
                "const r = document.getElementById('run-id'); return r ? Number(r.dataset.run) : null",
                30,
            )
            .await;
        if shown.as_i64() == Some(id) {
            return f;
        }
        assert!(
            Instant::now() < deadline,
            "page shows run {shown}, API serves run {id}"
        );
        tokio::time::sleep(Duration::from_millis(200)).await; // poll interval
    }
}

fn point_names(forecast: &Value) -> Vec<String> {
    forecast["points"]
        .as_array()
        .expect("points")
        .iter()
        .map(|p| p["name"].as_str().expect("point name").to_owned())
        .collect()
}

/// WCAG 2.1 contrast ratio (success criterion 1.4.3 and its definitions of
/// relative luminance and contrast ratio) for every visible text element,
/// against the first opaque background behind it. Returns failures.
const CONTRAST_SCRIPT: &str = r#"
const lin = c => { c /= 255; return c <= 0.03928 ? c / 12.92 : Math.pow((c + 0.055) / 1.055, 2.4); };
const lum = ([r, g, b]) => 0.2126 * lin(r) + 0.7152 * lin(g) + 0.0722 * lin(b);
const rgba = s => { const m = s.match(/[\d.]+/g).map(Number); return [m[0], m[1], m[2], m.length > 3 ? m[3] : 1]; };
const bgOf = el => { for (let e = el; e; e = e.parentElement) { const c = rgba(getComputedStyle(e).backgroundColor); if (c[3] >= 0.99) return c; } return [255, 255, 255, 1]; };
const bad = []; let checked = 0;
for (const el of document.querySelectorAll('body *')) {
  if (el.closest('svg') || el.closest('details:not([open]) > :not(summary)')) continue;
  const own = [...el.childNodes].some(n => n.nodeType === 3 && n.textContent.trim());
  if (!own) continue;
  const r = el.getBoundingClientRect(); if (r.width === 0 || r.height === 0) continue;
  const st = getComputedStyle(el); if (st.visibility === 'hidden') continue;
  const fg = rgba(st.color); const bg = bgOf(el);
  const mix = fg.slice(0, 3).map((c, i) => c * fg[3] * Number(st.opacity) + bg[i] * (1 - fg[3] * Number(st.opacity)));
  const L1 = lum(mix), L2 = lum(bg); const ratio = (Math.max(L1, L2) + 0.05) / (Math.min(L1, L2) + 0.05);
  checked++;
  if (ratio < 4.5) bad.push(`${ratio.toFixed(2)}:1 "${el.textContent.trim().slice(0, 40)}" (${el.tagName.toLowerCase()}.${el.className})`);
}
return {checked, bad};
"#;

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn demo_dashboard_shows_every_point_with_a_row_and_a_chart() {
    let _one = BROWSER.lock().await;
    let dir = tempfile::tempdir().expect("temp dir");
    let (app, key) = demo_app(dir.path(), quiet_replay).await;
    let first = wait_for_forecast(&app, &key).await;
    let names = point_names(&first);
    assert!(names.len() >= 3, "the demo reach has its points: {names:?}");

    let b = Browser::start().await;
    b.goto(&app.url("/?poll=2000")).await;
    // Compare the page with the run it shows: wait until it shows the run
    // the API serves now (a scheduled run may have landed since `first`).
    let forecast = settle_on_latest_run(&app, &b, "/api/reaches/brindlemoor/forecast").await;
    let rows = b
        .wait_for(
            "one overview row per point",
            &format!(
                "const r = [...document.querySelectorAll('#overview-body tr')].map(t => t.dataset.point); return r.length === {} ? r : null",
                names.len()
            ),
            30,
        )
        .await;
    // Rows in the API's downstream order, each with a status in words and an icon.
    assert_eq!(
        rows,
        json!(names),
        "rows ordered as the API orders points (downstream)"
    );
    let statuses = b
        .eval("return [...document.querySelectorAll('#overview-body tr')].map(t => { const s = t.querySelector('.status'); return {text: s.textContent.trim(), icon: s.querySelector('.icon').textContent, cls: s.className}; })")
        .await;
    for s in statuses.as_array().expect("statuses") {
        let text = s["text"].as_str().unwrap_or_default();
        assert!(
            ["clear", "rising to", "over ", "no thresholds"]
                .iter()
                .any(|w| text.contains(w)),
            "status in words: {s}"
        );
        assert!(
            !s["icon"].as_str().unwrap_or_default().trim().is_empty(),
            "status icon: {s}"
        );
    }
    // The one-line summary counts the points over a threshold now.
    let over_now = forecast["points"]
        .as_array()
        .expect("points")
        .iter()
        .filter(|p| {
            p["levels"]
                .as_array()
                .is_some_and(|t| t.iter().any(|t| t["above_now"] == true))
        })
        .count();
    let summary = b
        .eval("return document.getElementById('summary').textContent")
        .await;
    let summary = summary.as_str().unwrap_or_default();
    if over_now > 0 {
        assert!(
            summary.contains(&format!("{over_now} of {} points", names.len())),
            "summary counts {over_now} points over: {summary}"
        );
    } else {
        assert!(!summary.contains("Over a level now"), "{summary}");
    }
    // The first point's crest as the API gives it appears in its row.
    let crest = forecast["points"][0]["crest_stage"]
        .as_f64()
        .expect("crest");
    let row0 = b
        .eval("return document.querySelector('#overview-body tr').innerText")
        .await;
    assert!(
        row0.as_str()
            .unwrap_or_default()
            .contains(&format!("{crest:.2} m")),
        "crest {crest:.2} m in {row0}"
    );

    // One chart per point, each with the observed and forecast series, a
    // now line, a crest marker and one labelled line per threshold.
    let charts = b
        .eval("return [...document.querySelectorAll('svg.chart')].map(s => ({point: s.dataset.point, observed: !!s.querySelector('.series-observed'), forecast: s.querySelector('.series-forecast')?.getAttribute('stroke-dasharray'), now: !!s.querySelector('.now-line'), crest: !!s.querySelector('.crest'), levels: s.querySelectorAll('.level-label').length, ticks: s.querySelectorAll('.x-axis text.tick').length, title: s.querySelector('title').textContent}))")
        .await;
    let charts = charts.as_array().expect("charts");
    assert_eq!(charts.len(), names.len(), "one chart per point: {charts:?}");
    for (c, p) in charts
        .iter()
        .zip(forecast["points"].as_array().expect("points"))
    {
        assert_eq!(c["point"], p["name"]);
        assert!(c["forecast"].is_string(), "forecast drawn dashed: {c}");
        assert_eq!(c["now"], true, "now line: {c}");
        assert_eq!(c["crest"], true, "crest marker: {c}");
        // Every level (thresholds, low chord, deck) has its labelled line.
        let levels = p["levels"].as_array().map_or(0, Vec::len);
        assert_eq!(
            c["levels"].as_u64(),
            Some(levels as u64),
            "labelled level lines: {c}"
        );
        assert!(c["ticks"].as_u64().unwrap_or(0) >= 2, "time ticks: {c}");
        if p["observed"].as_array().is_some_and(|o| !o.is_empty()) {
            assert_eq!(c["observed"], true, "observed series: {c}");
        }
    }
    // The data table behind each chart has one row per distinct time.
    let table_rows = b
        .eval("return document.querySelectorAll('#chart-0 details.data tbody tr').length")
        .await;
    let n_times = forecast["points"][0]["times"]
        .as_array()
        .map_or(0, Vec::len) as u64;
    assert!(
        table_rows.as_u64().unwrap_or(0) >= n_times,
        "data table rows {table_rows} >= {n_times}"
    );

    // Freshness: the run id and method are shown.
    let run_id = forecast["run"]["id"].as_i64().expect("run id");
    let shown = b
        .eval("return document.getElementById('run-id').dataset.run")
        .await;
    assert_eq!(shown.as_str(), Some(run_id.to_string().as_str()));
    let method = b
        .eval("return document.getElementById('f-method').textContent")
        .await;
    assert!(
        method
            .as_str()
            .unwrap_or_default()
            .contains(forecast["run"]["method"].as_str().unwrap_or("?"))
    );

    // Times carry the reach's offset (e.g. "(+01:00)").
    let zone = forecast["reach"]["time_zone"]
        .as_str()
        .unwrap_or_default()
        .to_owned();
    if zone.starts_with('+') || zone.starts_with('-') {
        assert!(
            row0.as_str()
                .unwrap_or_default()
                .contains(&format!("({zone})")),
            "offset {zone} shown in {row0}"
        );
    }

    // The caution banner stays in view after scrolling to the bottom.
    let caution_top = b
        .eval("window.scrollTo(0, document.body.scrollHeight); const r = document.getElementById('caution').getBoundingClientRect(); return r.top >= 0 && r.bottom <= window.innerHeight && r.height > 0 ? document.getElementById('caution').textContent : null")
        .await;
    let caution_text = caution_top
        .as_str()
        .expect("caution banner visible after scrolling");
    assert!(caution_text.contains("Advisory model output only"));
    assert!(caution_text.contains("not an official warning"));
    b.eval("window.scrollTo(0, 0)").await;

    // WCAG 2.1 AA: text contrast at least 4.5:1.
    let contrast = b.eval(CONTRAST_SCRIPT).await;
    assert!(
        contrast["checked"].as_u64().unwrap_or(0) > 30,
        "contrast checked on the page: {contrast}"
    );
    assert_eq!(
        contrast["bad"],
        json!([]),
        "text below 4.5:1 contrast (WCAG 2.1 SC 1.4.3)"
    );

    // Keyboard: Tab reaches real controls and focus is visibly outlined.
    b.eval("document.activeElement && document.activeElement.blur(); document.body.focus();")
        .await;
    let mut seen: Vec<String> = Vec::new();
    for _ in 0..6 {
        b.keys("\u{E004}").await;
        let f = b
            .eval("const e = document.activeElement; const s = getComputedStyle(e); return {tag: e.tagName.toLowerCase(), id: e.id, text: (e.textContent || '').trim().slice(0, 30), outline: s.outlineStyle, width: s.outlineWidth}")
            .await;
        assert_ne!(f["tag"], "body", "Tab moves focus to a control: {f}");
        assert_eq!(
            f["outline"], "solid",
            "focused control has a visible outline: {f}"
        );
        seen.push(format!(
            "{}#{}",
            f["tag"].as_str().unwrap_or(""),
            f["id"].as_str().unwrap_or("")
        ));
    }
    assert!(
        seen.iter().any(|s| s.starts_with("input#units")),
        "units reachable by keyboard: {seen:?}"
    );

    b.eval("document.activeElement && document.activeElement.blur(); window.scrollTo(0, 0)")
        .await;
    b.screenshot("overview.png", None).await;
    let bridge = names
        .iter()
        .position(|n| n == "Sallowgate Bridge")
        .unwrap_or(0);
    b.screenshot(
        "chart-sallowgate-bridge.png",
        Some(&format!("#chart-{bridge}")),
    )
    .await;
    // The longitudinal profile of the demo network's main stem: a marker
    // per point on it, upstream first as the API lists them, and a table
    // row per point. The tributary's footbridge is not on it.
    let on_stem: Vec<&String> = names
        .iter()
        .filter(|n| n.as_str() != "Gill End footbridge")
        .collect();
    assert_eq!(on_stem.len() + 1, names.len(), "{names:?}");
    let marker_script = |n: usize| {
        format!(
            "const p = [...document.querySelectorAll('#profile svg.profile-chart .poi')].map(g => g.dataset.point); return p.length === {n} && document.querySelectorAll('#profile table.profile-table tbody tr').length === p.length ? p : null"
        )
    };
    let pois = b
        .wait_for(
            "the profile with a marker per point",
            &marker_script(on_stem.len()),
            30,
        )
        .await;
    assert_eq!(pois, json!(on_stem), "profile markers in the API's order");
    // The flow split at the confluence: both rivers arrive, one leaves,
    // and the arriving shares make up the whole (continuity, common
    // practice).
    let split = b
        .wait_for(
            "the flow split at Moss Foot",
            "const r = [...document.querySelectorAll('#profile table.split-table[data-junction=\"Moss Foot\"] tbody tr')].map(t => [t.dataset.channel, t.cells[1].textContent, t.cells[3].textContent]); return r.length === 3 ? r : null",
            30,
        )
        .await;
    let rows = split.as_array().expect("rows");
    let arriving: Vec<f64> = rows
        .iter()
        .filter(|r| r[1] == "arrives")
        .map(|r| {
            r[2].as_str()
                .and_then(|t| t.trim_end_matches(" %").parse().ok())
                .expect("a share")
        })
        .collect();
    assert_eq!(arriving.len(), 2, "{split}");
    assert!(
        (arriving.iter().sum::<f64>() - 100.0).abs() <= 1.0,
        "{split}"
    );
    b.screenshot("profile-demo.png", Some("#profile")).await;
    // The channel picker draws the tributary alone, with its footbridge.
    b.eval("const s = document.getElementById('profile-channel'); s.value = 'Moss Gill'; s.dispatchEvent(new Event('change'))")
        .await;
    let gill = b
        .wait_for("the Moss Gill profile", &marker_script(1), 30)
        .await;
    assert_eq!(gill, json!(["Gill End footbridge"]));
    b.eval("const s = document.getElementById('profile-channel'); s.value = ''; s.dispatchEvent(new Event('change'))")
        .await;
    b.wait_for("the main stem again", &marker_script(on_stem.len()), 30)
        .await;
    b.resize(1280, 1000).await;

    // The units toggle asks for US units and the rows follow the API's figures.
    let (status, us) = app
        .get_json("/api/reaches/brindlemoor/forecast?units=us")
        .await;
    assert_eq!(status, 200);
    let crest_ft = us["points"][0]["crest_stage"]
        .as_f64()
        .expect("crest in ft");
    b.eval("window.scrollTo(0, 0)").await;
    b.click("#units-us").await;
    b.wait_for(
        "the overview in feet",
        &format!(
            "const t = document.querySelector('#overview-body tr').innerText; return t.includes('{crest_ft:.2} ft') ? t : null"
        ),
        30,
    )
    .await;
    let axis = b
        .eval("return [...document.querySelectorAll('svg.chart .axis-title')].map(t => t.textContent)")
        .await;
    assert!(
        axis.to_string().contains("Stage (ft)"),
        "chart axis in feet: {axis}"
    );
    b.wait_for(
        "the profile in feet, chainage in miles",
        "const s = document.querySelector('#profile svg.profile-chart'); const t = s && [...s.querySelectorAll('.x-axis text.tick')].map(e => e.textContent); return s && s.querySelector('.axis-title').textContent === 'Elevation (ft)' && t.some(x => x.startsWith('mi ')) ? t : null",
        30,
    )
    .await;
    b.click("#units-si").await;
    b.wait_for(
        "the overview back in metres",
        &format!(
            "const t = document.querySelector('#overview-body tr').innerText; return t.includes('{crest:.2} m') ? t : null"
        ),
        30,
    )
    .await;

    // 360 px wide: no sideways scrolling of the page; rows become cards.
    b.resize(360, 780).await;
    let fits = b
        .wait_for(
            "the page to fit 360 px",
            "return document.documentElement.clientWidth <= 360 && document.querySelector('svg.chart').getAttribute('width') <= document.documentElement.clientWidth && document.querySelector('svg.profile-chart').getAttribute('width') <= document.documentElement.clientWidth ? {scroll: document.documentElement.scrollWidth, client: document.documentElement.clientWidth} : null",
            10,
        )
        .await;
    assert!(
        fits["scroll"].as_u64() <= fits["client"].as_u64(),
        "no horizontal overflow at 360 px: {fits}"
    );
    b.eval("window.scrollTo(0, 0)").await;
    b.screenshot("overview-360.png", None).await;
    b.screenshot("chart-360.png", Some(&format!("#chart-{bridge}")))
        .await;
    b.screenshot("profile-360.png", Some("#profile")).await;
    let errors = b.page_errors(&[]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");

    // The server goes away: the page says so, loudly, and keeps the last
    // figures on screen.
    app.stop().await;
    let conn = b
        .wait_for(
            "the lost-server notice",
            "const c = document.getElementById('conn'); return c.classList.contains('bad') && c.getAttribute('role') === 'alert' ? c.textContent : null",
            30,
        )
        .await;
    assert!(
        conn.as_str()
            .unwrap_or_default()
            .contains("Could not reach the server"),
        "{conn}"
    );
    let rows_left = b
        .eval("return document.querySelectorAll('#overview-body tr').length")
        .await;
    assert_eq!(
        rows_left.as_u64(),
        Some(names.len() as u64),
        "last figures kept"
    );
    // Only the refused connections may be logged.
    let errors = b.page_errors(&["net::ERR_CONNECTION_REFUSED"]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn stale_forecast_shows_the_warning() {
    let _one = BROWSER.lock().await;
    let dir = tempfile::tempdir().expect("temp dir");
    // The upstream gauge goes quiet (replay every hour) and counts as
    // stale after one minute; the reach is forecast every minute.
    let (app, key) = demo_app(dir.path(), |c| {
        c.demo.replay_secs = 3600;
        c.forecast.stale_after_minutes = 1;
        c.forecast.interval_minutes = 1;
    })
    .await;
    wait_for_forecast(&app, &key).await;
    let b = Browser::start().await;
    b.goto(&app.url("/?poll=2000")).await;
    b.wait_for(
        "the overview",
        "return document.querySelectorAll('#overview-body tr').length",
        30,
    )
    .await;
    let reasons = b
        .wait_for(
            "the stale warning",
            "const s = document.getElementById('stale'); return !s.hidden && s.getBoundingClientRect().height > 0 ? [...s.querySelectorAll('li')].map(l => l.textContent) : null",
            240,
        )
        .await;
    assert!(
        reasons.as_array().is_some_and(|r| !r.is_empty()),
        "the warning lists why: {reasons}"
    );
    // The page and the API agree.
    let (status, f) = app.get_json("/api/reaches/brindlemoor/forecast").await;
    assert_eq!(status, 200);
    assert_eq!(f["freshness"]["stale"], true, "API says stale too");
    // Same reasons, numbers aside: the ages in them move on between the
    // page's poll and this request.
    let shape = |v: &Value| -> Vec<String> {
        let mut out: Vec<String> = v
            .as_array()
            .into_iter()
            .flatten()
            .map(|r| {
                let text = r.as_str().unwrap_or_default();
                let mut o = String::new();
                for c in text.chars() {
                    if c.is_ascii_digit() {
                        if !o.ends_with('#') {
                            o.push('#');
                        }
                    } else {
                        o.push(c);
                    }
                }
                o
            })
            .collect();
        out.sort();
        out
    };
    assert_eq!(
        shape(&reasons),
        shape(&f["freshness"]["reasons"]),
        "the page lists the API's reasons"
    );
    b.screenshot("stale.png", None).await;
    // The profile says so too, in words.
    b.wait_for(
        "the profile marked stale",
        "const m = document.querySelector('#profile .stale-mark'); return m && m.textContent === 'stale data'",
        30,
    )
    .await;

    // A 360 x 640 phone: the data age is above the fold, and every row of
    // the overview says the data are stale, in words.
    b.resize(360, 640).await;
    let age = b
        .wait_for(
            "the data age above the fold at 360 x 640",
            "window.scrollTo(0, 0); const e = document.getElementById('data-age'); const r = e.getBoundingClientRect(); return window.innerHeight <= 640 && window.innerWidth <= 360 && !e.hidden && r.height > 0 && r.top >= 0 && r.bottom <= window.innerHeight ? {text: e.textContent, bottom: r.bottom, vh: window.innerHeight} : null",
            10,
        )
        .await;
    let age_text = age["text"].as_str().unwrap_or_default();
    assert!(
        age_text.contains("Stale data")
            && age_text.contains("Run #")
            && age_text.contains("upstream reading"),
        "run and reading ages, marked stale: {age}"
    );
    let marks = b
        .eval("return [...document.querySelectorAll('#overview-body tr')].map(r => r.querySelector('.stale-mark')?.textContent || '')")
        .await;
    let marks = marks.as_array().expect("rows");
    assert!(!marks.is_empty());
    assert!(
        marks
            .iter()
            .all(|m| m.as_str().unwrap_or_default() == "stale data"),
        "every overview row carries the stale mark: {marks:?}"
    );
    b.screenshot("stale-360x640.png", None).await;
    let errors = b.page_errors(&[]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    app.stop().await;
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn forecaster_upload_through_the_panel_changes_the_next_forecast() {
    let _one = BROWSER.lock().await;
    let dir = tempfile::tempdir().expect("temp dir");
    let (app, key) = demo_app(dir.path(), quiet_replay).await;
    let before = wait_for_forecast(&app, &key).await;
    let run_before = before["run"]["id"].as_i64().expect("run id");
    let crest_before = before["points"][0]["crest_stage"].as_f64().expect("crest");
    let now = chrono::DateTime::parse_from_rfc3339(before["now"].as_str().expect("now"))
        .expect("RFC 3339 now")
        .with_timezone(&chrono::Utc);

    let b = Browser::start().await;
    b.goto(&app.url("/?poll=2000")).await;
    b.wait_for(
        "the overview",
        "return document.querySelectorAll('#overview-body tr').length",
        30,
    )
    .await;
    // A marker that a full page reload would wipe.
    b.eval("window.__noReload = 'still here'").await;

    b.click("#forecaster > summary").await;
    b.type_into("#key-input", &key).await;
    b.click("#key-save").await;
    b.wait_for(
        "the key to be kept for the tab",
        "return sessionStorage.getItem('reachcast.key') ? true : null",
        5,
    )
    .await;
    // The key is checked when entered and named (`make_key` names it).
    b.wait_for(
        "the key accepted by name",
        "const t = document.getElementById('key-state').textContent; return t.startsWith('Key accepted: test forecaster') ? t : null",
        30,
    )
    .await;

    // A CSV with two bad rows: every bad row is listed.
    let t = |h: i64| {
        (now + chrono::Duration::hours(h)).to_rfc3339_opts(chrono::SecondsFormat::Secs, true)
    };
    let bad = format!("time,discharge\n{},40\nnot-a-time,50\n{},-5\n", t(0), t(2));
    b.js(
        "document.getElementById('up-csv').value = arguments[0]",
        json!([bad]),
    )
    .await;
    b.type_into("#up-reason", "test: malformed rows").await;
    b.click("#up-send").await;
    let errs = b
        .wait_for(
            "validation errors listed row by row",
            "const box = document.getElementById('up-errors'); return box.hidden ? null : [...box.querySelectorAll('tbody tr')].map(r => [...r.cells].map(c => c.textContent))",
            30,
        )
        .await;
    let errs = errs.as_array().expect("error rows");
    assert!(errs.len() >= 2, "both bad rows listed: {errs:?}");
    // Numbered as the box counts lines (header on line 1: rows 2 and 3 of
    // the data are lines 3 and 4), in plain words.
    assert_eq!(errs[0][0], "3", "{errs:?}");
    assert_eq!(errs[1][0], "4", "{errs:?}");
    assert!(
        errs[0][2]
            .as_str()
            .unwrap_or_default()
            .starts_with("Line 3: the time"),
        "{errs:?}"
    );
    assert!(
        !json!(errs).to_string().contains("RFC"),
        "no jargon: {errs:?}"
    );
    b.screenshot("upload-errors.png", Some("#forecaster")).await;

    // A much larger inflow from now on: the forecast crest must rise.
    let mut csv = String::from("time,discharge\n");
    for h in -1..=48 {
        let q = if (2..=30).contains(&h) { 450.0 } else { 60.0 };
        csv.push_str(&format!("{},{q}\n", t(h)));
    }
    b.js(
        "document.getElementById('up-csv').value = arguments[0]",
        json!([csv]),
    )
    .await;
    b.type_into("#up-reason", "test: revised upstream storm")
        .await;
    b.click("#up-send").await;
    confirm_preview(&b).await;
    let new_run = b
        .wait_for(
            "the next forecast run on the page",
            &format!(
                "const r = document.getElementById('run-id'); return r && Number(r.dataset.run) > {run_before} ? Number(r.dataset.run) : null"
            ),
            180,
        )
        .await;
    let (_, after) = app.get_json("/api/reaches/brindlemoor/forecast").await;
    assert_eq!(
        after["run"]["id"].as_i64(),
        new_run.as_i64(),
        "page shows the API's latest run"
    );
    assert_eq!(after["run"]["inflow"]["source_beyond_now"], "upload");
    let crest_after = after["points"][0]["crest_stage"]
        .as_f64()
        .expect("crest after");
    assert!(
        crest_after > crest_before + 0.05,
        "the uploaded storm raises the crest: {crest_before} -> {crest_after}"
    );
    let row0 = b
        .wait_for(
            "the new crest in the first row",
            &format!(
                "const t = document.querySelector('#overview-body tr').innerText; return t.includes('{crest_after:.2} m') ? t : null"
            ),
            30,
        )
        .await;
    assert!(row0.as_str().is_some());
    let inputs = b
        .eval("return document.getElementById('f-inputs').textContent")
        .await;
    assert!(
        inputs
            .as_str()
            .unwrap_or_default()
            .contains("uploaded inflow"),
        "{inputs}"
    );

    // The upload appears in the list, with a withdraw button.
    let listed = b
        .wait_for(
            "the upload in the list",
            "const r = [...document.querySelectorAll('#uploads-body tr[data-version]')]; return r.length ? r.map(x => x.innerText) : null",
            30,
        )
        .await;
    assert!(
        listed.to_string().contains("revised upstream storm"),
        "{listed}"
    );

    // A run started elsewhere reaches the open page by polling, with no reload.
    let latest = after["run"]["id"].as_i64().expect("run id");
    let run = app.run_and_wait(&key, "brindlemoor").await;
    assert_eq!(run.status(), 200);
    b.wait_for(
        "the page to pick up the newer run by polling",
        &format!(
            "const r = document.getElementById('run-id'); return Number(r.dataset.run) > {latest}"
        ),
        60,
    )
    .await;
    let marker = b.eval("return window.__noReload || null").await;
    assert_eq!(marker, "still here", "updated in place, not reloaded");
    // Polls of an unchanged forecast are answered 304 (If-None-Match sent).
    b.wait_for(
        "a 304 answer to a forecast poll",
        "return performance.getEntriesByType('resource').some(e => e.name.includes('/forecast') && e.responseStatus === 304)",
        30,
    )
    .await;

    b.screenshot("forecaster-panel.png", Some("#forecaster"))
        .await;

    // Withdraw the upload through the panel (with its confirm step).
    let version = b
        .eval("return document.querySelector('#uploads-body tr[data-version]:first-child').dataset.version")
        .await;
    let version: i64 = version
        .as_str()
        .and_then(|v| v.parse().ok())
        .expect("upload version");
    b.click(&format!(
        "#uploads-body tr[data-version='{version}'] button.withdraw"
    ))
    .await;
    b.click(&format!(
        "#uploads-body tr[data-version='{version}'] button.danger"
    ))
    .await;
    b.wait_for(
        "the upload shown as withdrawn",
        &format!("const r = document.querySelector(\"#uploads-body tr[data-version='{version}']\"); return r && r.innerText.includes('withdrawn')"),
        30,
    )
    .await;
    let (_, uploads) = app.get_json("/api/reaches/brindlemoor/inflows").await;
    let withdrawn = uploads["uploads"]
        .as_array()
        .expect("uploads")
        .iter()
        .find(|u| u["version"].as_i64() == Some(version))
        .map(|u| u["withdrawn"].clone());
    assert_eq!(
        withdrawn,
        Some(json!(true)),
        "API lists v{version} withdrawn: {uploads}"
    );
    // The 422 answer to the malformed upload is expected in the browser's
    // log (Chromium logs every non-2xx fetch); nothing else is.
    let errors = b
        .page_errors(&["inflows?reason=test%3A%20malformed%20rows&dry_run=true - Failed to load resource: the server responded with a status of 422"])
        .await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    app.stop().await;
}

/// Waits for the upload preview (the dry run's join) and confirms it.
async fn confirm_preview(b: &Browser) -> String {
    let jump = b
        .wait_for(
            "the preview of the join",
            "const p = document.getElementById('up-preview'); return p.hidden ? null : document.getElementById('up-jump').textContent",
            60,
        )
        .await;
    b.click("#up-confirm").await;
    jump.as_str().unwrap_or_default().to_owned()
}

/// The panel states the jump at the join in numbers before anything is
/// stored, draws the three inflows, and after confirmation marks the new
/// upload as the one in force, by the key's name.
#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn upload_preview_states_the_jump_and_the_list_marks_the_upload_in_force() {
    let _one = BROWSER.lock().await;
    let dir = tempfile::tempdir().expect("temp dir");
    let (app, key) = demo_app(dir.path(), quiet_replay).await;
    let before = wait_for_forecast(&app, &key).await;
    let now = chrono::DateTime::parse_from_rfc3339(before["now"].as_str().expect("now"))
        .expect("RFC 3339 now")
        .with_timezone(&chrono::Utc);
    let t = |h: i64| {
        (now + chrono::Duration::hours(h)).to_rfc3339_opts(chrono::SecondsFormat::Secs, true)
    };
    // Starts an hour after the last reading: it meets it with its first value.
    let csv = format!(
        "time,discharge\n{},450\n{},300\n{},120\n",
        t(1),
        t(6),
        t(30)
    );
    // The API's own dry run of the same text gives the observed side.
    let res = app
        .client
        .post(app.url("/api/reaches/brindlemoor/inflows?reason=check&dry_run=true"))
        .bearer_auth(&key)
        .header("content-type", "text/csv")
        .body(csv.clone())
        .send()
        .await
        .expect("dry run");
    let dry: Value = res.json().await.expect("dry run JSON");
    let q_obs = dry["join"]["last_observed"]["discharge"]
        .as_f64()
        .unwrap_or_else(|| panic!("an observed flow: {dry}"));
    // Hand arithmetic: |450 - q| / max(450, q), in per cent to one decimal.
    let pct = format!(
        "({:.1} %)",
        100.0 * (450.0 - q_obs).abs() / q_obs.max(450.0)
    );
    let (_, list) = app.get_json("/api/reaches/brindlemoor/inflows").await;
    let count = list["uploads"].as_array().map_or(0, Vec::len);

    let b = Browser::start().await;
    b.goto(&app.url("/")).await;
    b.click("#forecaster > summary").await;
    b.type_into("#key-input", &key).await;
    b.click("#key-save").await;
    b.wait_for(
        "the key accepted",
        "return document.getElementById('key-state').textContent.startsWith('Key accepted') || null",
        30,
    )
    .await;
    // The upload in force comes into the box as the API's CSV, to revise.
    let current = app
        .get_with(
            "/api/reaches/brindlemoor/inflows/current",
            "accept",
            "text/csv",
        )
        .await
        .text()
        .await
        .expect("CSV of the upload in force");
    b.click("#up-revise").await;
    let boxed = b
        .wait_for(
            "the upload in force in the box",
            "const v = document.getElementById('up-csv').value; return v.startsWith('time,discharge') ? v : null",
            30,
        )
        .await;
    assert_eq!(boxed.as_str(), Some(current.as_str()));
    b.js(
        "document.getElementById('up-csv').value = arguments[0]",
        json!([csv]),
    )
    .await;
    b.js(
        "document.getElementById('up-run').checked = false",
        json!([]),
    )
    .await;
    b.type_into("#up-reason", "test: preview then confirm")
        .await;
    b.click("#up-send").await;
    let jump = b
        .wait_for(
            "the jump stated before sending",
            "const p = document.getElementById('up-preview'); return p.hidden ? null : document.getElementById('up-jump').textContent",
            60,
        )
        .await;
    let jump = jump.as_str().unwrap_or_default();
    assert!(jump.contains("to 450 m³/s in the new inflow"), "{jump}");
    assert!(jump.contains(&pct), "{jump} should say {pct}");
    let paths = b
        .eval("return document.querySelectorAll('#up-chart svg path').length")
        .await;
    assert_eq!(paths, 3, "observed, in force and new inflow drawn");
    // Nothing is stored until the hydrologist confirms.
    let (_, still) = app.get_json("/api/reaches/brindlemoor/inflows").await;
    assert_eq!(still["uploads"].as_array().map_or(0, Vec::len), count);
    b.screenshot("upload-preview.png", Some("#forecaster"))
        .await;
    b.click("#up-confirm").await;

    let marked = b
        .wait_for(
            "the new upload marked in force",
            &format!(
                "const r = [...document.querySelectorAll('#uploads-body tr.in-force:not([data-boundary])')]; return r.length === 1 && Number(r[0].dataset.version) > {count} ? [r[0].dataset.version, r[0].innerText] : null"
            ),
            30,
        )
        .await;
    let (_, after) = app.get_json("/api/reaches/brindlemoor/inflows").await;
    let in_force: Vec<&Value> = after["uploads"]
        .as_array()
        .expect("uploads")
        .iter()
        .filter(|u| u["in_force"] == true && u["boundary"].is_null())
        .collect();
    assert_eq!(in_force.len(), 1, "one upstream inflow in force: {after}");
    assert_eq!(marked[0], in_force[0]["version"].to_string(), "{marked}");
    let row = marked[1].as_str().unwrap_or_default();
    assert!(
        row.contains("in force") && row.contains("test forecaster"),
        "{row}"
    );
    let errors = b.page_errors(&[]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    app.stop().await;
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn empty_server_shows_the_caution_and_says_there_is_no_reach() {
    let _one = BROWSER.lock().await;
    let dir = tempfile::tempdir().expect("temp dir");
    let app = spawn_app(dir.path()).await; // demo off
    let b = Browser::start().await;
    b.goto(&app.url("/")).await;
    let notice = b
        .wait_for(
            "the no-reach notice",
            "const p = document.getElementById('no-forecast'); return p.hidden ? null : p.textContent",
            30,
        )
        .await;
    assert!(
        notice.as_str().unwrap_or_default().contains("No reach"),
        "{notice}"
    );
    let caution = b
        .eval("const c = document.getElementById('caution'); const r = c.getBoundingClientRect(); return r.height > 0 && r.top >= 0 ? c.textContent : null")
        .await;
    assert!(
        caution
            .as_str()
            .unwrap_or_default()
            .contains("not an official warning")
    );
    let errors = b.page_errors(&[]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    app.stop().await;
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn reach_picker_switches_reach_with_its_own_units_and_time_zone() {
    let _one = BROWSER.lock().await;
    let dir = tempfile::tempdir().expect("temp dir");
    let admin = make_key(dir.path(), "admin", &[]).await;
    let (app, key) = demo_app(dir.path(), quiet_replay).await;
    wait_for_forecast(&app, &key).await;

    // A second invented reach: the demo geometry, shown in US units on a
    // -05:00 clock.
    let mut spec = demo_reach_json();
    spec["name"] = json!("Tansy Beck test copy (invented)");
    spec["service"]["units"] = json!("us");
    spec["service"]["time_zone"] = json!("-05:00");
    let put = app.put_reach(&admin, "tansy-test", &spec).await;
    assert!(put.status().is_success(), "PUT reach: {}", put.status());
    let run = app.run_and_wait(&key, "tansy-test").await;
    assert_eq!(run.status(), 200);
    let b = Browser::start().await;
    b.goto(&app.url("/?poll=2000")).await;
    b.wait_for(
        "the reach picker with both reaches",
        "const p = document.getElementById('reach-pick'); return !p.hidden && document.querySelectorAll('#reach-select option').length === 2",
        30,
    )
    .await;
    b.click("#reach-select option[value='tansy-test']").await;
    b.wait_for(
        "the second reach's title",
        "return document.getElementById('reach-title').textContent.startsWith('Tansy')",
        30,
    )
    .await;
    let us = settle_on_latest_run(&app, &b, "/api/reaches/tansy-test/forecast").await;
    assert_eq!(
        us["units"]["stage"], "ft",
        "the reach's own units by default"
    );
    let crest_ft = us["points"][0]["crest_stage"]
        .as_f64()
        .expect("crest in ft");
    let row0 = b
        .wait_for(
            "the second reach's overview in feet",
            &format!(
                "const t = document.querySelector('#overview-body tr')?.innerText || ''; return t.includes('{crest_ft:.2} ft') ? t : null"
            ),
            30,
        )
        .await;
    assert!(
        row0.as_str().unwrap_or_default().contains("(-05:00)"),
        "times on the reach's -05:00 clock: {row0}"
    );
    assert!(
        b.eval("return document.getElementById('units-us').checked")
            .await
            == json!(true)
    );
    let title = b
        .eval("return document.getElementById('reach-title').textContent")
        .await;
    assert_eq!(title, "Tansy Beck test copy (invented)");
    // Chainage in US units: miles (5280 ft each, NIST SP 811 appendix B),
    // whole feet under one mile; never feet / 1000 labelled "km".
    let places = b
        .eval("return [...document.querySelectorAll('#overview-body tr th .muted')].map(e => e.textContent)")
        .await;
    let places: Vec<String> = places
        .as_array()
        .expect("row labels")
        .iter()
        .map(|v| v.as_str().unwrap_or_default().to_owned())
        .collect();
    let expected: Vec<String> = us["points"]
        .as_array()
        .expect("points")
        .iter()
        .map(|p| {
            let ft = p["chainage"].as_f64().expect("chainage in ft");
            if ft < 5280.0 {
                format!("ft {}", ft.round())
            } else {
                format!("mi {:.1}", ft / 5280.0)
            }
        })
        .collect();
    assert_eq!(places.len(), expected.len(), "{places:?}");
    for (shown, want) in places.iter().zip(&expected) {
        assert!(shown.ends_with(want), "{shown} shows {want}");
        assert!(!shown.contains("km"), "no km in feet mode: {shown}");
    }
    assert!(
        expected.iter().any(|e| e.starts_with("mi ")),
        "some point lies over a mile downstream: {expected:?}"
    );
    let errors = b.page_errors(&[]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    app.stop().await;
}

/// The invented bridge reach of `common::bridge_reach` with its upstream
/// discharge gauge, and no readings yet: so no forecast until the test
/// posts readings and asks for a run.
async fn bridge_app_without_forecast() -> ReachApp {
    let gauge = reach_gauge("Test gauge", "test-reach", "discharge", 19.0, 2.0);
    let reach = bridge_reach("Test reach (invented)", "Test Bridge", "test-gauge");
    // A long debounce: only the test's own run request produces a forecast.
    ReachApp::start(
        |c| c.forecast.debounce_ms = 600_000,
        ("test-reach", &reach),
        ("test-gauge", &gauge),
    )
    .await
}

/// Six hours of steady discharge readings every 15 min up to now.
fn steady_readings(q: f64) -> Value {
    let now = chrono::Utc::now();
    let readings: Vec<Value> = (0..=24)
        .map(|k| {
            let t = now - chrono::Duration::minutes(15 * (24 - k));
            json!({"time": t.to_rfc3339(), "discharge": q, "quality": "good"})
        })
        .collect();
    json!({ "readings": readings })
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn first_forecast_appears_soon_after_the_page_opened_without_one() {
    let _one = BROWSER.lock().await;
    let s = bridge_app_without_forecast().await;
    let (status, _) = s.app.get_json("/api/reaches/test-reach/forecast").await;
    assert_eq!(status, 404, "no forecast before any reading");
    let b = Browser::start().await;
    // The normal 30 s poll interval: without the quick retries the page
    // would not ask again for 30 s.
    b.goto(&s.app.url("/")).await;
    b.wait_for(
        "the no-forecast notice",
        "const p = document.getElementById('no-forecast'); return p.hidden ? null : p.textContent.includes('No forecast yet')",
        30,
    )
    .await;
    b.eval("window.__noReload = 'still here'").await;
    // The worker's first run (at the reach's creation, before any reading)
    // must be over before the readings arrive, or on a loaded machine it
    // could read them and land a forecast before the test's own run.
    let deadline = Instant::now() + Duration::from_secs(60);
    loop {
        let (_, runs) = s.app.get_json("/api/reaches/test-reach/runs").await;
        let done = runs["runs"]
            .as_array()
            .is_some_and(|r| !r.is_empty() && r.iter().all(|x| x["status"] != "running"));
        if done {
            break;
        }
        assert!(
            Instant::now() < deadline,
            "the first run never finished: {runs}"
        );
        tokio::time::sleep(Duration::from_millis(100)).await; // poll interval
    }
    assert_success(
        s.app
            .post_readings(&s.keys.gauge, "test-gauge", &steady_readings(40.0))
            .await,
    )
    .await;
    let run = s.app.run_and_wait(&s.keys.forecaster, "test-reach").await;
    assert_eq!(run.status(), 200);
    let (_, f) = s.app.get_json("/api/reaches/test-reach/forecast").await;
    let run_id = f["run"]["id"].as_i64().expect("run id");
    // The back-off (0.5, 1, 2, 4, 8 s ...) asks again within 16 s of any
    // moment in the first half minute; 20 s is still well under the 30 s
    // a plain poll would take.
    let shown = b
        .wait_for(
            "the first forecast on the page",
            "const r = document.getElementById('run-id'); return r && document.querySelectorAll('#overview-body tr').length ? Number(r.dataset.run) : null",
            20,
        )
        .await;
    assert_eq!(shown.as_i64(), Some(run_id), "the page shows the API's run");
    let marker = b.eval("return window.__noReload || null").await;
    assert_eq!(marker, "still here", "updated in place, not reloaded");
    // The status line is written when the whole refresh (forecast,
    // profile, verification, ratings) is done: wait for it.
    let conn = b
        .wait_for(
            "the normal interval once a forecast is shown",
            "const t = document.getElementById('conn').textContent; return t.includes('checks again every 30 s') ? t : null",
            20,
        )
        .await;
    assert!(
        conn.as_str()
            .unwrap_or_default()
            .contains("checks again every 30 s"),
        "back to the normal interval once a forecast is shown: {conn}"
    );
    let errors = b
        .page_errors(&["/api/reaches/test-reach/forecast?units=si - Failed to load resource: the server responded with a status of 404"])
        .await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    s.app.stop().await;
}

/// Script: the time labels of every chart whose box leaves its svg's box.
const LABELS_OUTSIDE: &str = r#"
const out = []; let checked = 0;
for (const svg of document.querySelectorAll('svg.chart')) {
  const box = svg.getBoundingClientRect();
  for (const t of svg.querySelectorAll('.x-axis text.tick')) {
    const r = t.getBoundingClientRect(); checked++;
    if (r.left < box.left - 0.5 || r.right > box.right + 0.5 || r.top < box.top - 0.5 || r.bottom > box.bottom + 0.5)
      out.push(`${svg.dataset.point}: "${t.textContent}" ${r.left.toFixed(1)}..${r.right.toFixed(1)} outside ${box.left.toFixed(1)}..${box.right.toFixed(1)}`);
  }
}
return {checked, out};
"#;

/// Async script: draws, with the page's chart module, an invented point
/// over one whole day (ticks at both ends of the axis) into `#charts`.
const EDGE_TICK_CHART: &str = r#"
const done = arguments[arguments.length - 1];
import('/js/chart.js').then(m => {
  const t0 = Date.parse('2026-03-14T00:00:00Z');
  const times = [], stage = [];
  for (let k = 0; k <= 24; k++) { times.push(new Date(t0 + k * 3600e3).toISOString()); stage.push(10 + Math.sin(k / 4)); }
  const point = { name: 'edge ticks (invented)', times, stage, observed: [], thresholds: [], crest_stage: 11, crest_time: times[6] };
  const width = Math.min(document.getElementById('charts').clientWidth - 2, 360);
  const svg = m.renderChart(document, point, { zone: '+00:00', units: { stage: 'm' }, now: times[12], width, titleId: 'edge-title' });
  document.getElementById('charts').append(svg);
  done(svg.querySelectorAll('.x-axis text.tick').length >= 2);
}).catch(e => done(String(e)));
"#;

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn phone_charts_keep_time_labels_inside_and_resolve_a_5_cm_clearance() {
    let _one = BROWSER.lock().await;
    let s = bridge_app_without_forecast().await;
    let reading = steady_readings(40.0);
    assert_success(
        s.app
            .post_readings(&s.keys.gauge, "test-gauge", &reading)
            .await,
    )
    .await;
    assert_eq!(
        s.app
            .run_and_wait(&s.keys.forecaster, "test-reach")
            .await
            .status(),
        200
    );
    let (_, f) = s.app.get_json("/api/reaches/test-reach/forecast").await;
    let crest = f["points"][0]["crest_stage"].as_f64().expect("crest");
    // Put the low chord 5 cm above that crest (the deck 1 m higher): the
    // steady inflow keeps the crest where it was.
    let mut reach = bridge_reach("Test reach (invented)", "Test Bridge", "test-gauge");
    reach["points"][0]["low_chord"] = json!(crest + 0.05);
    reach["points"][0]["deck"] = json!(crest + 1.05);
    let put = s.app.put_reach(&s.keys.admin, "test-reach", &reach).await;
    assert!(put.status().is_success(), "PUT reach: {}", put.status());
    assert_eq!(
        s.app
            .run_and_wait(&s.keys.forecaster, "test-reach")
            .await
            .status(),
        200
    );
    let (_, f) = s.app.get_json("/api/reaches/test-reach/forecast").await;
    let margin = f["points"][0]["low_chord_margin"]
        .as_f64()
        .expect("low chord margin");
    assert!(
        (0.0..0.1).contains(&margin),
        "a clearance of about 5 cm: {margin}"
    );

    let b = Browser::start().await;
    b.resize(360, 780).await;
    b.goto(&s.app.url("/")).await;
    b.wait_for(
        "a chart drawn at phone width",
        "const s = document.querySelector('svg.chart'); return s && Number(s.getAttribute('width')) <= 360",
        30,
    )
    .await;
    // Also a chart whose first and last ticks fall exactly on the ends of
    // its time axis (midnight to midnight, each a new day), drawn by the
    // page's own module into the page.
    let drawn = b.eval_async(EDGE_TICK_CHART).await;
    assert_eq!(drawn, json!(true), "edge-tick chart drawn: {drawn}");
    let labels = b.eval(LABELS_OUTSIDE).await;
    assert!(
        labels["checked"].as_u64().unwrap_or(0) >= 2,
        "time labels checked: {labels}"
    );
    assert_eq!(labels["out"], json!([]), "time labels inside their chart");
    // The crest marker and the low chord line are apart by at least the
    // chart's minimum gap (6 px for 5 cm, less half a pixel of rounding),
    // measured on screen.
    let gap = b
        .eval("const s = document.querySelector('svg.chart'); const c = s.querySelector('.crest').getBoundingClientRect(); const lows = [...s.querySelectorAll('line.level-structure')].map(l => l.getBoundingClientRect().top); return {px: Math.abs(Math.max(...lows) - (c.top + c.height / 2)), axis: s.querySelector('.axis-title').textContent, text: s.closest('section').querySelector('p').textContent}")
        .await;
    let px = gap["px"].as_f64().unwrap_or(0.0);
    assert!(
        px >= 5.5 * margin.max(0.05) / 0.05,
        "5 cm between crest and low chord is visible: {gap}"
    );
    assert!(
        gap["text"].as_str().unwrap_or_default().contains(&format!(
            "low chord {:.2} m, {margin:.2} m to spare",
            crest + 0.05
        )),
        "the clearance in words above the chart: {gap}"
    );
    // A fresh forecast on a 360 x 640 phone: the data age is above the
    // fold and no row is marked stale.
    b.resize(360, 640).await;
    let age = b
        .wait_for(
            "the data age above the fold at 360 x 640",
            "window.scrollTo(0, 0); const e = document.getElementById('data-age'); const r = e.getBoundingClientRect(); return window.innerHeight <= 640 && !e.hidden && r.height > 0 && r.top >= 0 && r.bottom <= window.innerHeight ? e.textContent : null",
            10,
        )
        .await;
    let run_id = f["run"]["id"].as_i64().expect("run id");
    assert!(
        age.as_str()
            .unwrap_or_default()
            .starts_with(&format!("Run #{run_id} finished")),
        "{age}"
    );
    let marks = b
        .eval("return document.querySelectorAll('#overview-body .stale-mark').length")
        .await;
    assert_eq!(marks, json!(0), "a fresh forecast has no stale mark");
    b.screenshot("chart-clearance-360.png", Some("#chart-0"))
        .await;
    let errors = b.page_errors(&[]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    s.app.stop().await;
}

/// A4 width at 96 CSS px per inch: 210 mm / 25.4 mm per inch * 96 = 793.7,
/// so 794 px (CSS Values 4 fixes 1 in = 96 px; ISO 216 fixes A4 at 210 mm;
/// both from memory). US Letter, 8.5 in, is wider (816 px), so fitting A4
/// fits both.
const A4_PX: u64 = 794;

/// Script: what the briefing layout shows and how wide the page is.
const BRIEFING_STATE: &str = r#"
const shown = sel => { const e = document.querySelector(sel); return !!e && getComputedStyle(e).display !== 'none' && e.getBoundingClientRect().height > 0; };
const svgs = [...document.querySelectorAll('svg.chart')];
return {
  scroll: document.documentElement.scrollWidth,
  inner: window.innerWidth,
  forecaster: shown('.forecaster'), upload: shown('#upload-form'), key: shown('#key-form'),
  controls: shown('#controls'), conn: shown('#conn'),
  caution: shown('#caution') ? document.getElementById('caution').textContent : null,
  summary: shown('#summary') ? document.getElementById('summary').textContent : null,
  age: shown('#data-age') ? document.getElementById('data-age').textContent : null,
  rows: document.querySelectorAll('#overview-body tr').length,
  charts: svgs.length,
  chartsFit: svgs.every(s => s.getBoundingClientRect().right <= document.documentElement.clientWidth + 0.5),
  profile: !!document.querySelector('section#profile'), profileShown: shown('#profile'),
  profileFits: (() => { const s = document.querySelector('#profile svg.profile-chart'); return !!s && s.getBoundingClientRect().right <= document.documentElement.clientWidth + 0.5; })(),
  profileAfterOverview: !!(document.getElementById('overview').compareDocumentPosition(document.getElementById('profile')) & Node.DOCUMENT_POSITION_FOLLOWING),
};
"#;

/// The briefing as `BRIEFING_STATE` reports it has what a planner needs and
/// none of the forecaster tools, within A4 width.
fn assert_briefing(state: &Value, run_id: i64, points: usize, how: &str) {
    assert_eq!(
        state["forecaster"], false,
        "{how}: forecaster tools left out: {state}"
    );
    assert_eq!(state["upload"], false, "{how}: {state}");
    assert_eq!(state["key"], false, "{how}: {state}");
    assert_eq!(
        state["controls"], false,
        "{how}: reach and unit controls left out: {state}"
    );
    assert!(
        state["caution"]
            .as_str()
            .is_some_and(|c| c.contains("not an official warning")),
        "{how}: the caution is kept: {state}"
    );
    assert!(
        state["summary"].as_str().is_some_and(|s| !s.is_empty()),
        "{how}: summary sentence: {state}"
    );
    assert!(
        state["age"]
            .as_str()
            .is_some_and(|a| a.contains(&format!("Run #{run_id} finished"))),
        "{how}: data age and run id: {state}"
    );
    assert_eq!(
        state["rows"].as_u64(),
        Some(points as u64),
        "{how}: {state}"
    );
    assert_eq!(
        state["charts"].as_u64(),
        Some(points as u64),
        "{how}: {state}"
    );
    assert_eq!(
        state["chartsFit"], true,
        "{how}: charts within the page: {state}"
    );
    assert_eq!(
        state["profile"], true,
        "{how}: the profile section is there: {state}"
    );
    assert_eq!(
        state["profileShown"], true,
        "{how}: the longitudinal profile is in the briefing: {state}"
    );
    assert_eq!(
        state["profileFits"], true,
        "{how}: profile within the page: {state}"
    );
    assert_eq!(state["profileAfterOverview"], true, "{how}: {state}");
    assert!(
        state["inner"].as_u64().unwrap_or(u64::MAX) <= A4_PX
            && state["scroll"].as_u64().unwrap_or(u64::MAX) <= A4_PX,
        "{how}: page no wider than A4 at 96 dpi ({A4_PX} px): {state}"
    );
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn briefing_view_and_print_fit_a4_without_the_forecaster_tools() {
    let _one = BROWSER.lock().await;
    let dir = tempfile::tempdir().expect("temp dir");
    let (app, key) = demo_app(dir.path(), quiet_replay).await;
    wait_for_forecast(&app, &key).await;
    let b = Browser::start().await;
    b.resize(A4_PX as u32, 1000).await;

    // On screen at /?view=briefing.
    b.goto(&app.url("/?view=briefing")).await;
    let f = settle_on_latest_run(&app, &b, "/api/reaches/brindlemoor/forecast").await;
    let run_id = f["run"]["id"].as_i64().expect("run id");
    let points = point_names(&f).len();
    let state = b
        .wait_for(
            "the briefing with its charts",
            &format!("const s = (() => {{ {BRIEFING_STATE} }})(); return s.charts === {points} && s.age && s.profileShown ? s : null"),
            30,
        )
        .await;
    assert_briefing(&state, run_id, points, "briefing view");
    b.screenshot("briefing.png", None).await;

    // The full dashboard printed (print media emulated over CDP): the same
    // briefing layout, and the print button hidden on paper.
    b.goto(&app.url("/")).await;
    b.wait_for(
        "the dashboard with its charts",
        &format!("return document.querySelectorAll('svg.chart').length === {points} && !!document.querySelector('svg.profile-chart')"),
        30,
    )
    .await;
    let screen = b.eval(BRIEFING_STATE).await;
    assert_eq!(
        screen["forecaster"], true,
        "on screen the tools are there: {screen}"
    );
    // The button calls the browser's print (stubbed: a real dialog would block).
    b.eval("window.print = () => { window.__printed = true; }")
        .await;
    b.click("#print-briefing").await;
    assert_eq!(
        b.eval("return window.__printed === true").await,
        json!(true)
    );
    b.cdp("Emulation.setEmulatedMedia", json!({"media": "print"}))
        .await;
    let printed = b.eval(BRIEFING_STATE).await;
    assert_briefing(&printed, run_id, points, "print media");
    let button = b
        .eval("return document.getElementById('print-briefing').getClientRects().length")
        .await;
    assert_eq!(button, json!(0), "no print button on paper");
    b.cdp("Emulation.setEmulatedMedia", json!({"media": ""}))
        .await;
    // Before printing the charts are redrawn 700 px wide (within A4 less
    // 12 mm margins, 703 px), and after it at the screen's width again.
    let widths = b
        .eval("const w = () => [...document.querySelectorAll('svg.chart')].map(s => Number(s.getAttribute('width'))); const screen = w(); window.dispatchEvent(new Event('beforeprint')); const paper = w(); window.dispatchEvent(new Event('afterprint')); return {screen, paper, after: w()}")
        .await;
    assert!(
        widths["paper"]
            .as_array()
            .is_some_and(|p| p.len() == points && p.iter().all(|w| w.as_u64() == Some(700))),
        "charts drawn for paper: {widths}"
    );
    assert_eq!(widths["after"], widths["screen"], "and back: {widths}");
    let errors = b.page_errors(&[]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    app.stop().await;
}

/// The bridge reach with readings at 40 m³/s up to now and an upload
/// rising to 400 m³/s four hours ahead, holding four hours and falling
/// back to 20 m³/s at sixteen (as in `bridge_levels.rs`: by Manning's
/// formula the crest passes the low chord, 19.5 m, and falls back below it
/// within the forecast); run, and the forecast it served.
async fn bridge_app_flooded() -> (ReachApp, Value) {
    let s = bridge_app_without_forecast().await;
    let now = chrono::Utc::now();
    let readings: Vec<Value> = (0..=12)
        .map(|k| {
            let t = now - chrono::Duration::minutes(15 * (12 - k));
            json!({"time": t.to_rfc3339(), "discharge": 40.0, "quality": "good"})
        })
        .collect();
    let body = json!({ "readings": readings });
    assert_success(
        s.app
            .post_readings(&s.keys.gauge, "test-gauge", &body)
            .await,
    )
    .await;
    let h = |x: i64| (now + chrono::Duration::hours(x)).to_rfc3339();
    let series = [(0, 40.0), (4, 400.0), (8, 400.0), (16, 20.0), (48, 20.0)];
    let upload = json!({
        "reason": "invented flood over the low chord",
        "series": series.iter().map(|(t, q)| json!({"time": h(*t), "discharge": q})).collect::<Vec<_>>(),
    });
    let res = s
        .app
        .post_inflow(&s.keys.forecaster, "test-reach", &upload)
        .await;
    assert_eq!(res.status(), 201, "upload accepted");
    let run = s.app.run_and_wait(&s.keys.forecaster, "test-reach").await;
    assert_eq!(run.status(), 200, "run finished");
    let (status, f) = s.app.get_json("/api/reaches/test-reach/forecast").await;
    assert_eq!(status, 200);
    (s, f)
}

/// An RFC 3339 time as the overview writes it, "Sat 15:10", on the
/// +01:00 clock of `bridge_reach`: formatted here with chrono, not with
/// the page's code.
fn weekday_clock_plus_one(t: &Value) -> String {
    let zone = chrono::FixedOffset::east_opt(3600).expect("+01:00");
    chrono::DateTime::parse_from_rfc3339(t.as_str().expect("a time"))
        .expect("RFC 3339")
        .with_timezone(&zone)
        .format("%a %H:%M")
        .to_string()
}

/// Script: the overview row's "When" text and the chart's crossing marks
/// of level `arguments[0]` (time, label, title, label inside the svg).
const CROSSING_STATE: &str = r#"
const row = document.querySelector('#overview-body tr');
const svg = document.querySelector('svg.chart');
const box = svg.getBoundingClientRect();
const marks = [...svg.querySelectorAll(`.crossing[data-level="${arguments[0]}"]`)].map(g => {
  const t = g.querySelector('text'); const r = t && t.getBoundingClientRect();
  return { dir: g.classList.contains('crossing-up') ? 'up' : 'down', time: g.dataset.time,
    label: t ? t.textContent : null, title: g.querySelector('title').textContent,
    inside: !!r && r.left >= box.left - 0.5 && r.right <= box.right + 0.5 && r.top >= box.top - 0.5 && r.bottom <= box.bottom + 0.5 };
});
const table = [...document.querySelectorAll(`table.crossings tr[data-level="${arguments[0]}"] td`)].map(td => td.textContent);
return { when: row.querySelector('td[data-label="When"]').textContent, marks, table };
"#;

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn a_bridge_whose_crest_passes_the_low_chord_shows_its_crossing_time_and_reopening_time() {
    let _one = BROWSER.lock().await;
    let (s, f) = bridge_app_flooded().await;
    let lc = f["points"][0]["levels"]
        .as_array()
        .expect("levels")
        .iter()
        .find(|l| l["id"] == "low_chord")
        .expect("a low chord level")
        .clone();
    assert_eq!(lc["exceeded"], true, "the flood passes the low chord: {lc}");
    let (up, down) = (
        weekday_clock_plus_one(&lc["first_above"]),
        weekday_clock_plus_one(&lc["back_below"]),
    );
    let b = Browser::start().await;
    b.goto(&s.app.url("/")).await;
    b.wait_for(
        "the bridge's row and chart",
        "return document.querySelector('#overview-body tr') && document.querySelector('svg.chart .crossing')",
        30,
    )
    .await;
    let state = b.js(CROSSING_STATE, json!(["low_chord"])).await;
    let when = state["when"].as_str().unwrap_or_default();
    assert!(
        when.contains(&format!("({up}), back below {down}")),
        "the low chord's crossing {up} and reopening {down} in the row: {state}"
    );
    let marks = state["marks"].as_array().expect("marks");
    assert_eq!(marks.len(), 2, "a rise and a fall mark: {state}");
    for (mark, dir, t, clock) in [
        (&marks[0], "up", &lc["first_above"], &up),
        (&marks[1], "down", &lc["back_below"], &down),
    ] {
        assert_eq!(mark["dir"], dir, "{state}");
        let at = |v: &Value| {
            chrono::DateTime::parse_from_rfc3339(v.as_str().unwrap_or_default()).expect("time")
        };
        assert!(
            (at(&mark["time"]) - at(t)).num_milliseconds().abs() <= 1,
            "mark at the API's time {t}: {mark}"
        );
        let hhmm = &clock[4..];
        let arrow = if dir == "up" { "↑" } else { "↓" };
        assert_eq!(mark["label"], format!("{hhmm} {arrow}"), "{mark}");
        assert_eq!(mark["inside"], true, "label inside the chart: {mark}");
        assert!(
            mark["title"]
                .as_str()
                .unwrap_or_default()
                .contains(&format!("{hhmm} (+01:00)")),
            "the full time in the mark's title: {mark}"
        );
    }
    let table = state["table"].as_array().expect("table cells");
    assert!(
        table.len() == 3
            && table[1]
                .as_str()
                .unwrap_or_default()
                .ends_with(&format!("{} (+01:00)", &up[4..])),
        "the crossing in the table under the chart: {state}"
    );
    b.screenshot("chart-low-chord-crossings.png", Some("#chart-0"))
        .await;
    let errors = b.page_errors(&[]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    s.app.stop().await;
}

/// Script: the profile read off its SVG at the bridge: the envelope
/// path's y at the bridge's x (linear between the path's vertices, parsed
/// here), the low chord line's y there, and the page's caution and table.
const PROFILE_AT_BRIDGE: &str = r#"
const svg = document.querySelector('#profile svg.profile-chart');
if (!svg) return null;
const lc = svg.querySelector('.poi-bridge .low-chord');
const bx = (Number(lc.getAttribute('x1')) + Number(lc.getAttribute('x2'))) / 2;
const pts = svg.querySelector('path.envelope').getAttribute('d').split(/(?=[ML])/).map(s => s.slice(1).split(',').map(Number));
let ey = null;
for (let i = 1; i < pts.length; i++) {
  const [x0, y0] = pts[i - 1], [x1, y1] = pts[i];
  if (bx >= x0 && bx <= x1) { ey = x1 === x0 ? y0 : y0 + (y1 - y0) * (bx - x0) / (x1 - x0); break; }
}
const c = document.getElementById('caution');
const row = [...document.querySelectorAll('#profile table.profile-table tbody tr')].map(r => r.textContent);
return { bx, envelopeY: ey, lowChordY: Number(lc.getAttribute('y1')), poiX: Number(svg.querySelector('.poi-bridge line').getAttribute('x1')),
  shown: getComputedStyle(document.getElementById('profile')).display !== 'none',
  caution: c.getBoundingClientRect().height > 0 && getComputedStyle(c).visibility !== 'hidden' ? c.textContent : null,
  legend: document.querySelector('#profile .legend').textContent, rows: row };
"#;

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn the_profile_draws_the_envelope_above_the_low_chord_at_that_bridges_chainage() {
    let _one = BROWSER.lock().await;
    let (s, _) = bridge_app_flooded().await;
    let (status, prof) = s.app.get_json("/api/reaches/test-reach/profile").await;
    assert_eq!(status, 200, "the profile endpoint answers: {prof}");
    let b = Browser::start().await;
    b.goto(&s.app.url("/")).await;
    let at = b.wait_for("the profile drawn", PROFILE_AT_BRIDGE, 30).await;
    assert_eq!(at["shown"], true, "{at}");
    let (ey, ly) = (
        at["envelopeY"].as_f64().expect("envelope y at the bridge"),
        at["lowChordY"].as_f64().expect("low chord y"),
    );
    assert!(
        ey < ly,
        "the envelope is drawn above the low chord at the bridge (smaller y): {at}"
    );
    let (bx, px) = (
        at["bx"].as_f64().unwrap_or(-1.0),
        at["poiX"].as_f64().unwrap_or(-2.0),
    );
    assert!(
        (bx - px).abs() < 0.6,
        "the bridge drawn at its point's chainage: {at}"
    );
    assert!(
        at["caution"]
            .as_str()
            .is_some_and(|c| c.contains("not an official warning")),
        "the caution stays visible: {at}"
    );
    assert!(
        at["legend"]
            .as_str()
            .is_some_and(|l| l.contains("highest forecast water surface (dashed)")),
        "the envelope has a key entry that does not rely on colour: {at}"
    );
    // The table under it: the flood's highest is above the low chord.
    let highest = prof["points"][0]["highest"].as_f64().expect("highest");
    let room = format!("water {:.2} m above", highest - 19.5);
    assert!(
        at["rows"][0]
            .as_str()
            .is_some_and(|r| r.contains("km 5.0") && r.contains(&room)),
        "the table row says {room}: {at}"
    );
    b.screenshot("profile-bridge.png", Some("#profile")).await;
    let errors = b.page_errors(&[]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    s.app.stop().await;
}

/// Waits until the latest run of the forecast at `path` has its ensemble
/// attached, polling the API; returns that forecast.
async fn wait_for_ensemble(app: &TestApp, path: &str) -> Value {
    let deadline = Instant::now() + Duration::from_secs(180);
    loop {
        let (status, f) = app.get_json(path).await;
        assert_eq!(status, 200, "{f}");
        match f["run"]["ensemble"]["status"].as_str() {
            Some("ready") => return f,
            Some("failed") => panic!("the demo ensemble failed: {}", f["run"]["ensemble"]),
            _ => {}
        }
        assert!(
            Instant::now() < deadline,
            "no ensemble after 180 s: {}",
            f["run"]["ensemble"]
        );
        tokio::time::sleep(Duration::from_millis(250)).await; // poll interval
    }
}

/// Script: per hydrograph, the scenario band's parts and what the page
/// says about them; per overview row, its chance lines; the profile's band.
const ENSEMBLE_STATE: &str = r#"
const charts = [...document.querySelectorAll('svg.chart')];
const bands = charts.map(svg => {
  const g = svg.querySelector('g.ensemble');
  const band = g && g.querySelector('path.ensemble-band');
  if (!band) return null;
  const pts = d => d.split(/(?=[MLZ])/).filter(s => s[0] !== 'Z').map(s => s.slice(1).split(',').map(Number));
  const edge = q => { const e = g.querySelector(`path.ensemble-edge[data-percentile="${q}"]`); return e ? pts(e.getAttribute('d')) : null; };
  const med = g.querySelector('path.ensemble-median');
  const fc = svg.querySelector('path.series-forecast');
  const box = band.getBBox();
  return { point: svg.dataset.point, lo: Number(g.dataset.lo), hi: Number(g.dataset.hi), vertices: pts(band.getAttribute('d')).length,
    outlines: (band.getAttribute('d').match(/Z/g) || []).length, height: box.height, width: box.width, fill: band.getAttribute('fill'),
    loEdge: edge(g.dataset.lo), hiEdge: edge(g.dataset.hi), median: med ? pts(med.getAttribute('d')) : null, medianDash: med ? med.getAttribute('stroke-dasharray') : null,
    behindForecast: !!fc && !!(g.compareDocumentPosition(fc) & Node.DOCUMENT_POSITION_FOLLOWING) };
});
if (!bands.length || bands.some(b => !b)) return null;
const rows = Object.fromEntries([...document.querySelectorAll('#overview-body tr')].map(tr =>
  [tr.dataset.point, [...tr.querySelectorAll('td[data-label="Chance in scenarios"] .chance')].map(c => c.textContent)]));
const legends = [...document.querySelectorAll('#charts .legend')].map(l => l.textContent);
const notes = [...document.querySelectorAll('#charts .range-note')].map(n => n.textContent);
const psvg = document.querySelector('#profile svg.profile-chart');
const c = document.getElementById('caution');
return { bands, rows, legends, notes, summary: document.getElementById('ensemble-note').textContent,
  profileBand: !!(psvg && psvg.querySelector('path.ensemble-band')), profileLegend: (document.querySelector('#profile .legend') || {}).textContent || '',
  caution: c.getBoundingClientRect().height > 0 ? c.textContent : null };
"#;

/// The overview's words for a level's chance, built here from the API's
/// counts (not with the page's code): "7 of 20 scenarios reach the low
/// chord (35 %)" (no-break space before "%"), then ", earliest Wed 14:20" for a crossing still ahead.
fn chance_words(level: &Value, now: &Value) -> Option<String> {
    let c = &level["chance"];
    let (k, n) = (c["members_reaching"].as_u64()?, c["members"].as_u64()?);
    let p = c["probability"].as_f64()?;
    // Rounded percentages only; the page words the ends ("under 1 %").
    if k == 0 || n < 2 || (p > 0.0 && p < 0.005) || (p < 1.0 && p > 0.995) {
        return None;
    }
    let who = if k == n {
        format!("all {n} scenarios reach")
    } else if k == 1 {
        format!("1 of {n} scenarios reaches")
    } else {
        format!("{k} of {n} scenarios reach")
    };
    let what = match level["kind"].as_str() {
        Some("low_chord") => "the low chord".to_owned(),
        Some("deck") => "the deck".to_owned(),
        _ => level["name"].as_str()?.to_owned(),
    };
    // A no-break space before "%", as the page writes it.
    let mut s = format!("{who} {what} ({:.0}\u{a0}%)", (p * 100.0).round());
    let t = |v: &Value| chrono::DateTime::parse_from_rfc3339(v.as_str()?).ok();
    if let (Some(first), Some(now)) = (t(&c["earliest_first_above"]), t(now))
        && first > now
    {
        s.push_str(&format!(
            ", earliest {}",
            weekday_clock_plus_one(&c["earliest_first_above"])
        ));
    }
    Some(s)
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn the_scenarios_range_is_shaded_behind_each_hydrograph_and_each_levels_chance_is_worded() {
    let _one = BROWSER.lock().await;
    let dir = tempfile::tempdir().expect("temp dir");
    // More scenarios than the tests' default four, so that chances fall
    // between none and all.
    let (app, key) = demo_app(dir.path(), |c| {
        quiet_replay(c);
        c.forecast.max_ensemble_members = 12;
    })
    .await;
    wait_for_forecast(&app, &key).await;
    wait_for_ensemble(&app, "/api/reaches/brindlemoor/forecast").await;

    let b = Browser::start().await;
    b.goto(&app.url("/?poll=2000")).await;
    let f = settle_on_latest_run(&app, &b, "/api/reaches/brindlemoor/forecast").await;
    let brief = &f["run"]["ensemble"];
    assert_eq!(brief["status"], "ready", "{brief}");
    assert_eq!(
        f["reach"]["time_zone"], "+01:00",
        "the expected times are written on the demo's +01:00 clock"
    );
    let st = b
        .wait_for("a scenario band on every hydrograph", ENSEMBLE_STATE, 30)
        .await;
    let points = f["points"].as_array().expect("points");
    let bands = st["bands"].as_array().expect("bands");
    assert_eq!(bands.len(), points.len(), "one band per chart: {st}");

    let pct: Vec<f64> = brief["percentiles"]
        .as_array()
        .expect("percentiles")
        .iter()
        .filter_map(Value::as_f64)
        .collect();
    let (lo, hi) = (
        pct.iter().copied().fold(f64::INFINITY, f64::min),
        pct.iter().copied().fold(f64::NEG_INFINITY, f64::max),
    );
    let used = brief["members_used"].as_u64().expect("members used");
    let key_text = format!("p{lo}–p{hi} of {used} scenarios (shaded)");
    for (p, band) in points.iter().zip(bands) {
        assert_eq!(
            band["point"], p["name"],
            "charts in the API's order: {band}"
        );
        assert_eq!(
            (band["lo"].as_f64(), band["hi"].as_f64()),
            (Some(lo), Some(hi)),
            "the band spans the lowest to the highest served percentile: {band}"
        );
        // One outline through every sample of the lowest and highest
        // trace: the API's samples forwards along the top, back along
        // the bottom.
        let finite = |q: f64| {
            p["ensemble"]["stage"]
                .as_array()
                .expect("traces")
                .iter()
                .find(|t| t["percentile"].as_f64() == Some(q))
                .and_then(|t| t["stage"].as_array())
                .map(|s| s.iter().filter(|v| v.is_f64()).count())
                .expect("the trace is served")
        };
        assert_eq!(band["outlines"], 1, "{band}");
        assert_eq!(
            band["vertices"].as_u64(),
            Some((finite(lo) + finite(hi)) as u64),
            "{band}"
        );
        assert!(
            band["height"].as_f64().unwrap_or(0.0) > 1.0
                && band["width"].as_f64().unwrap_or(0.0) > 100.0,
            "the band is drawn with an area: {band}"
        );
        assert_eq!(
            band["behindForecast"], true,
            "drawn before (behind) the model run: {band}"
        );
        // The median lies within the band at every sample: on screen
        // (y down) the highest percentile is above it, the lowest below.
        let (top, bottom, mid) = (
            band["hiEdge"].as_array().expect("top edge"),
            band["loEdge"].as_array().expect("bottom edge"),
            band["median"].as_array().expect("median drawn"),
        );
        assert_eq!(top.len(), mid.len(), "{band}");
        for ((t, m), l) in top.iter().zip(mid).zip(bottom) {
            let y = |v: &Value| v[1].as_f64().expect("y");
            assert!(
                y(t) <= y(m) + 0.11 && y(m) <= y(l) + 0.11,
                "p50 within p{lo}–p{hi} at x {}: {t} {m} {l}",
                m[0]
            );
        }
        assert!(
            band["medianDash"]
                .as_str()
                .is_some_and(|d| !d.trim().is_empty()),
            "the median is dashed: {band}"
        );
    }
    for l in st["legends"].as_array().expect("legends") {
        let l = l.as_str().unwrap_or_default();
        assert!(l.contains(&key_text), "key names the band: {l}");
        assert!(
            l.contains("p50 of the scenarios"),
            "key names the median: {l}"
        );
    }

    // Each level's chance in words and numbers, in its point's row.
    let mut checked = 0;
    for p in points {
        let name = p["name"].as_str().expect("name");
        let lines: Vec<String> = st["rows"][name]
            .as_array()
            .unwrap_or_else(|| panic!("row for {name}: {st}"))
            .iter()
            .map(|v| v.as_str().unwrap_or_default().to_owned())
            .collect();
        for l in p["levels"].as_array().expect("levels") {
            let Some(words) = chance_words(l, &f["now"]) else {
                continue;
            };
            let line = lines
                .iter()
                .find(|t| t.starts_with(&words))
                .unwrap_or_else(|| panic!("{name}: no line starting {words:?} in {lines:#?}"));
            checked += 1;
            let only = l["exceeded"] == false;
            assert_eq!(
                line.contains("only in scenarios"),
                only,
                "{name}: a level only the scenarios reach says so, others not: {line}"
            );
        }
    }
    assert!(
        checked >= 3,
        "the demo's levels have chances to check: {st}"
    );

    // The built-in spreads are said to be unverified, beside the charts
    // and in the overview.
    let defaults = "default assumptions, not verified against this river";
    let summary = st["summary"].as_str().unwrap_or_default();
    let notes = st["notes"].as_array().expect("notes");
    if brief["spreads_are_defaults"] == true {
        assert!(summary.contains(defaults), "{summary}");
        assert_eq!(notes.len(), points.len(), "a note per chart: {st}");
        assert!(
            notes
                .iter()
                .all(|n| n.as_str().is_some_and(|n| n.contains(defaults))),
            "{st}"
        );
    } else {
        assert!(!summary.contains(defaults), "{summary}");
    }
    assert!(
        summary.contains(&format!("{used} scenarios")),
        "the overview counts the scenarios: {summary}"
    );

    // The profile shades the scenarios' highest water surface too.
    let (status, prof) = app.get_json("/api/reaches/brindlemoor/profile").await;
    assert_eq!(status, 200, "{prof}");
    let has_range = prof["highest_percentiles"]
        .as_array()
        .is_some_and(|t| t.len() >= 2);
    // The profile is fetched after the forecast the snapshot waited for:
    // wait for its band rather than race it.
    let profile_band = if has_range {
        b.wait_for(
            "the profile's scenario band",
            "return document.querySelector('#profile svg.profile-chart path.ensemble-band') ? true : null",
            30,
        )
        .await
        .as_bool()
    } else {
        st["profileBand"].as_bool()
    };
    assert_eq!(profile_band, Some(has_range), "{st}");
    if has_range {
        let legend = b
            .eval("return (document.querySelector('#profile .legend') || {}).textContent || ''")
            .await;
        let l = legend.as_str().unwrap_or_default();
        assert!(
            l.contains(&format!("p{lo}–p{hi} of {used} scenarios")),
            "{l}"
        );
    }
    assert!(
        st["caution"]
            .as_str()
            .is_some_and(|c| c.contains("Advisory model output only")
                && c.contains("not an official warning")),
        "the caution stays: {st}"
    );
    b.screenshot("ensemble-band.png", Some("#charts")).await;
    b.screenshot("ensemble-overview.png", Some("#overview"))
        .await;
    let errors = b.page_errors(&[]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    app.stop().await;
}

/// The bridge reach with an ensemble of its own: 12 scenarios whose only
/// spread is the inflow's peak (scaled 0.5 to 1.5), so the spreads are not
/// the defaults; flooded as in `bridge_app_flooded`, and forecast.
async fn bridge_app_with_scenarios() -> (ReachApp, Value) {
    let gauge = reach_gauge("Test gauge", "test-reach", "discharge", 19.0, 2.0);
    let mut reach = bridge_reach("Test reach (invented)", "Test Bridge", "test-gauge");
    reach["ensemble"] = json!({"members": 12, "peak_scale": [0.5, 1.5], "timing_shift_hours": 0,
        "manning_factor": [1, 1], "rating_factor": [1, 1]});
    let s = ReachApp::start(
        |c| {
            c.forecast.debounce_ms = 600_000;
            c.forecast.max_ensemble_members = 12;
        },
        ("test-reach", &reach),
        ("test-gauge", &gauge),
    )
    .await;
    assert_success(
        s.app
            .post_readings(&s.keys.gauge, "test-gauge", &steady_readings(40.0))
            .await,
    )
    .await;
    let now = chrono::Utc::now();
    let h = |x: i64| (now + chrono::Duration::hours(x)).to_rfc3339();
    let series = [(0, 40.0), (4, 300.0), (8, 300.0), (16, 20.0), (48, 20.0)];
    let upload = json!({
        "reason": "invented flood for the scenarios",
        "series": series.iter().map(|(t, q)| json!({"time": h(*t), "discharge": q})).collect::<Vec<_>>(),
    });
    let res = s
        .app
        .post_inflow(&s.keys.forecaster, "test-reach", &upload)
        .await;
    assert_eq!(res.status(), 201, "upload accepted");
    let run = s.app.run_and_wait(&s.keys.forecaster, "test-reach").await;
    assert_eq!(run.status(), 200, "run finished");
    let f = wait_for_ensemble(&s.app, "/api/reaches/test-reach/forecast").await;
    (s, f)
}

/// Script: the overview row's chance lines, each with its level and
/// whether its note is set in bold; and the ensemble note.
const CHANCE_LINES: &str = r#"
const lines = [...document.querySelectorAll('#overview-body tr td[data-label="Chance in scenarios"] .chance')];
if (!lines.length) return null;
return { lines: lines.map(l => ({ level: l.dataset.level || null, text: l.textContent,
    bold: !!l.querySelector('strong.only-note') && getComputedStyle(l.querySelector('strong.only-note')).fontWeight >= 600 })),
  summary: document.getElementById('ensemble-note').textContent, glance: document.getElementById('summary').textContent,
  notes: [...document.querySelectorAll('#charts .range-note')].map(n => n.textContent) };
"#;

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn a_level_only_the_scenarios_reach_is_marked_so_in_the_overview() {
    let _one = BROWSER.lock().await;
    let (s, f) = bridge_app_with_scenarios().await;
    let brief = &f["run"]["ensemble"];
    assert_eq!(brief["spreads_are_defaults"], false, "{brief}");
    // Thresholds every tenth of the way from the lowest scenario crest to
    // the highest: those above the model run's crest only scenarios reach.
    let p = &f["points"][0];
    let crest = &p["ensemble"]["crest"];
    let (lo, hi) = (
        crest["min"].as_f64().expect("min"),
        crest["max"].as_f64().expect("max"),
    );
    assert!(hi - lo > 0.05, "the scenarios spread the crest: {crest}");
    let mut reach = bridge_reach("Test reach (invented)", "Test Bridge", "test-gauge");
    reach["ensemble"] = json!({"members": 12, "peak_scale": [0.5, 1.5], "timing_shift_hours": 0,
        "manning_factor": [1, 1], "rating_factor": [1, 1]});
    reach["points"][0]["thresholds"] = (1..10)
        .map(|k| {
            let z = lo + (hi - lo) * f64::from(k) / 10.0;
            json!({"id": format!("g{k}"), "name": format!("grid {k}"), "elevation": z})
        })
        .collect();
    assert_success(s.app.put_reach(&s.keys.admin, "test-reach", &reach).await).await;
    let run = s.app.run_and_wait(&s.keys.forecaster, "test-reach").await;
    assert_eq!(run.status(), 200, "run finished");
    let before = f["run"]["id"].as_i64().expect("run id");
    let deadline = Instant::now() + Duration::from_secs(180);
    let f = loop {
        let f = wait_for_ensemble(&s.app, "/api/reaches/test-reach/forecast").await;
        if f["run"]["id"].as_i64() > Some(before) {
            break f;
        }
        assert!(Instant::now() < deadline, "no second run: {}", f["run"]);
        tokio::time::sleep(Duration::from_millis(250)).await; // poll interval
    };
    let levels = f["points"][0]["levels"].as_array().expect("levels");
    let only: Vec<&Value> = levels
        .iter()
        .filter(|l| l["exceeded"] == false && l["chance"]["members_reaching"].as_u64() > Some(0))
        .collect();
    assert!(
        !only.is_empty(),
        "a level only scenarios reach (the grid spans their crests): {levels:#?}"
    );

    let b = Browser::start().await;
    b.goto(&s.app.url("/?poll=2000")).await;
    let f = settle_on_latest_run(&s.app, &b, "/api/reaches/test-reach/forecast").await;
    let st = b.wait_for("the chance lines", CHANCE_LINES, 30).await;
    let lines = st["lines"].as_array().expect("lines");
    let levels = f["points"][0]["levels"].as_array().expect("levels");
    let mut marked = 0;
    for l in levels {
        let id = l["id"].as_str().expect("level id");
        let k = l["chance"]["members_reaching"]
            .as_u64()
            .expect("members reaching");
        if k == 0 && l["exceeded"] == false {
            continue; // named together on the "none of the scenarios" line
        }
        let line = lines
            .iter()
            .find(|x| x["level"] == id)
            .unwrap_or_else(|| panic!("no chance line for {id}: {st}"));
        let text = line["text"].as_str().unwrap_or_default();
        if let Some(words) = chance_words(l, &f["now"]) {
            assert!(text.starts_with(&words), "{id}: {text:?} starts {words:?}");
        }
        let only = k > 0 && l["exceeded"] == false;
        assert_eq!(
            text.contains("only in scenarios, not in the model run"),
            only,
            "{id}: {text}"
        );
        if only {
            assert_eq!(line["bold"], true, "the note is set in bold: {line}");
            marked += 1;
        }
    }
    assert!(marked >= 1, "a level marked as only in scenarios: {st}");
    // The glance summary names them too, with their counts.
    let glance = st["glance"].as_str().unwrap_or_default();
    assert!(
        glance.contains("Reached only in scenarios, not in the model run:"),
        "{glance}"
    );
    for l in levels
        .iter()
        .filter(|l| l["exceeded"] == false && l["chance"]["members_reaching"].as_u64() > Some(0))
    {
        let words = match l["kind"].as_str() {
            Some("deck") => "the deck".to_owned(),
            Some("low_chord") => "the low chord".to_owned(),
            _ => l["name"].as_str().unwrap_or_default().to_owned(),
        };
        let item = format!(
            "{words} at Test Bridge ({} of {})",
            l["chance"]["members_reaching"], l["chance"]["members"]
        );
        assert!(glance.contains(&item), "the summary names {item}: {glance}");
    }
    // Spreads of the reach's own: no defaults caution.
    let summary = st["summary"].as_str().unwrap_or_default();
    assert!(summary.contains("12 scenarios"), "{summary}");
    assert!(!summary.contains("default assumptions"), "{summary}");
    assert!(
        st["notes"].as_array().is_some_and(|n| n
            .iter()
            .all(|n| !n.as_str().unwrap_or_default().contains("default"))),
        "{st}"
    );
    b.screenshot("ensemble-only-in-scenarios.png", Some("#overview"))
        .await;
    let errors = b.page_errors(&[]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    s.app.stop().await;
}

/// Script: "pending" while every chart says its range is pending (and no
/// band is drawn), "band" once every chart has its band, else null; with
/// the overview's chance lines and the page's load marker.
const PENDING_OR_BAND: &str = r#"
const charts = [...document.querySelectorAll('svg.chart')];
if (!charts.length) return null;
const notes = [...document.querySelectorAll('#charts .range-note')].map(n => n.textContent);
const bands = charts.filter(c => c.querySelector('path.ensemble-band')).length;
const lines = [...document.querySelectorAll('#overview-body td[data-label="Chance in scenarios"] .chance')].map(c => c.textContent);
const pending = bands === 0 && notes.length === charts.length && notes.every(n => n.includes('range pending'));
const state = pending ? 'pending' : bands === charts.length ? 'band' : null;
return state && { state, notes, lines, summary: document.getElementById('ensemble-note').textContent, marker: window.__loadMarker || null };
"#;

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn a_pending_range_says_so_and_the_band_follows_without_a_reload() {
    let _one = BROWSER.lock().await;
    // The bridge reach on 50 m nodes with 200 scenarios: in a debug build
    // they take seconds to route after the model run is served, long
    // enough for the page (asking every second) to show them pending.
    let gauge = reach_gauge("Test gauge", "test-reach", "discharge", 19.0, 2.0);
    let mut reach = bridge_reach("Test reach (invented)", "Test Bridge", "test-gauge");
    reach["max_node_spacing"] = json!(50);
    reach["ensemble"] = json!({"members": 200});
    let s = ReachApp::start(
        |c| {
            c.forecast.debounce_ms = 600_000;
            c.forecast.max_ensemble_members = 200;
        },
        ("test-reach", &reach),
        ("test-gauge", &gauge),
    )
    .await;
    let b = Browser::start().await;
    b.goto(&s.app.url("/?poll=1000")).await;
    b.wait_for(
        "the no-forecast notice",
        "const p = document.getElementById('no-forecast'); return p.hidden ? null : p.textContent.includes('No forecast yet')",
        30,
    )
    .await;
    b.eval("window.__loadMarker = 'first load'; return true")
        .await;
    assert_success(
        s.app
            .post_readings(&s.keys.gauge, "test-gauge", &steady_readings(40.0))
            .await,
    )
    .await;
    let run = s.app.run_and_wait(&s.keys.forecaster, "test-reach").await;
    assert_eq!(run.status(), 200, "run finished");
    let first = b
        .wait_for("the range pending, or the band", PENDING_OR_BAND, 60)
        .await;
    let f = wait_for_ensemble(&s.app, "/api/reaches/test-reach/forecast").await;
    let took = f["run"]["ensemble"]["wall_time_s"]
        .as_f64()
        .expect("wall time");
    if first["state"] == "pending" {
        let lines = first["lines"].as_array().expect("lines");
        assert!(
            !lines.is_empty()
                && lines
                    .iter()
                    .all(|l| l.as_str() == Some("scenarios pending: still being routed")),
            "every row says its chances are pending: {first}"
        );
        let summary = first["summary"].as_str().unwrap_or_default();
        assert!(
            summary.contains("200 scenarios still being routed")
                && summary.contains("default assumptions"),
            "{summary}"
        );
    } else {
        // Only scenarios routed faster than the page asks could be missed.
        assert!(
            took < 1.5,
            "the scenarios took {took} s, yet the page never showed them pending: {first}"
        );
    }
    let used = f["run"]["ensemble"]["members_used"]
        .as_u64()
        .expect("members used");
    let after = b
        .wait_for(
            "the band once the scenarios are routed",
            &format!("const s = (() => {{ {PENDING_OR_BAND} }})(); return s && s.state === 'band' ? s : null"),
            60,
        )
        .await;
    assert_eq!(
        after["marker"], "first load",
        "the band came by polling, without a reload: {after}"
    );
    assert!(
        after["notes"].as_array().is_some_and(|n| n
            .iter()
            .all(|n| !n.as_str().unwrap_or_default().contains("pending"))),
        "no pending note beside a band: {after}"
    );
    assert!(
        after["summary"]
            .as_str()
            .is_some_and(|s| s.contains(&format!("{used} scenarios"))),
        "{after}"
    );
    eprintln!(
        "pending seen: {}; the scenarios took {took:.1} s",
        first["state"] == "pending"
    );
    let errors = b
        .page_errors(&["/api/reaches/test-reach/forecast?units=si - Failed to load resource: the server responded with a status of 404"])
        .await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    s.app.stop().await;
}

/// The page repeats what `/ready` says when the service is not ready:
/// with the clock set back (the last good run's finish time moved an hour
/// ahead through another connection, as `faults::` does), the service
/// problem notice appears with the server's reason, above the forecast.
#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn a_service_problem_on_ready_is_shown_on_the_page() {
    let _one = BROWSER.lock().await;
    let dir = tempfile::tempdir().expect("temp dir");
    let (app, key) = demo_app(dir.path(), |c| {
        c.demo.replay_secs = 3600;
        c.forecast.interval_minutes = 60;
    })
    .await;
    wait_for_forecast(&app, &key).await;
    let b = Browser::start().await;
    b.goto(&app.url("/?poll=2000")).await;
    b.wait_for(
        "the overview",
        "return document.querySelectorAll('#overview-body tr').length",
        30,
    )
    .await;
    let hidden = b
        .wait_for(
            "the notice hidden while ready",
            "return document.getElementById('service-problem').hidden ? true : null",
            10,
        )
        .await;
    assert_eq!(hidden, Value::Bool(true));
    let options =
        sqlx::sqlite::SqliteConnectOptions::new().filename(dir.path().join("reachcast.sqlite3"));
    let mut other = sqlx::ConnectOptions::connect(&options)
        .await
        .expect("second connection");
    let ahead = reachcast::wire_time::format(chrono::Utc::now() + chrono::Duration::hours(1));
    sqlx::query("UPDATE forecast_runs SET finished_at = ?1 WHERE status = 'ok'")
        .bind(&ahead)
        .execute(&mut other)
        .await
        .expect("move the finish time");
    sqlx::Connection::close(other).await.expect("close");
    let text = b
        .wait_for(
            "the service problem notice",
            "const s = document.getElementById('service-problem'); return !s.hidden && s.getBoundingClientRect().height > 0 ? s.textContent : null",
            30,
        )
        .await;
    let text = text.as_str().unwrap_or_default();
    assert!(
        text.contains("clock") && text.contains("follow official warnings"),
        "{text}"
    );
    // The browser logs the 503 of /ready itself; nothing else.
    let errors = b.page_errors(&["/ready - Failed to load resource"]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    app.stop().await;
}

/// The verification on the page equals the API's: each chart carries its
/// point's track record in words, and the verification section has the
/// point's table and one bar per verified band, above zero (the model beat
/// holding the last reading, by construction in
/// `verification::verified_scenario`: skill 0.5).
#[tokio::test]
#[ignore = "needs chromium and chromedriver; run with --include-ignored"]
async fn the_track_record_is_shown_beside_each_forecast_and_in_its_own_section() {
    let _one = BROWSER.lock().await;
    let s = crate::verification::verified_scenario().await;
    let reach = crate::verification::REACH;
    let b = Browser::start().await;
    b.goto(&s.app.url(&format!("/?poll=2000#reach={reach}")))
        .await;
    let page = b
        .wait_for(
            "the verification section",
            "const p = document.querySelector('.verify-point'); const t = document.querySelector('.track-record'); return p && t ? {title: p.querySelector('h3').textContent, bars: [...p.querySelectorAll('rect.bar-better')].map(r => r.dataset.band), worse: p.querySelectorAll('rect.bar-worse').length, rows: [...p.querySelectorAll('tbody tr')].map(r => [...r.children].map(c => c.textContent)), record: t.textContent, correction: document.querySelector('.correction-note')?.textContent, corrected_lines: document.querySelectorAll('.series-corrected').length, levels: [...p.querySelectorAll('.level-record li')].map(l => l.textContent)} : null",
            60,
        )
        .await;
    let (status, v) = s
        .app
        .get_json(&format!("/api/reaches/{reach}/verification"))
        .await;
    assert_eq!(status, 200);
    let point = &v["points"][0];
    assert_eq!(
        page["title"],
        format!("{}: verified", point["name"].as_str().unwrap_or_default()),
        "{page}"
    );
    assert_eq!(page["bars"], json!(["0–3 h", "3–6 h"]), "{page}");
    assert_eq!(page["worse"], 0);
    let rows = page["rows"].as_array().expect("rows");
    assert_eq!(rows.len(), 2);
    for (row, band) in rows.iter().zip(point["bands"].as_array().expect("bands")) {
        let mae = format!(
            "{:.2} m",
            band["model"]["mae_m"].as_f64().unwrap_or(f64::NAN)
        );
        assert_eq!(row[3], json!(mae), "{row}");
        assert_eq!(row[8], "verified");
    }
    let record = page["record"].as_str().unwrap_or_default();
    assert!(
        record.contains(
            "0–3 h ahead, typical error 0.10 m (50 % better than holding the last reading; 2 runs)"
        ),
        "{record}"
    );
    assert!(
        page["levels"].as_array().is_some_and(|l| l.iter().any(|t| t
            .as_str()
            .is_some_and(|t| t.starts_with("low (16.00 m): 1 hit")))),
        "{page}"
    );
    // Run 3 was opened before there was history: its correction is off,
    // says why, and is not drawn.
    assert_eq!(
        page["correction"],
        "Correction at the gauge not in use: no verified history at this point yet."
    );
    assert_eq!(page["corrected_lines"], 0);
    // Run 4 is opened on that history and its correction is on
    // (`verification::forecasts_are_scored_…`): the page draws it dotted
    // and keys it.
    let run = s.app.run_and_wait(&s.keys.forecaster, reach).await;
    assert!(run.status().is_success());
    let shown = b
        .wait_for(
            "the corrected series",
            "const n = document.querySelectorAll('.series-corrected').length; const k = [...document.querySelectorAll('.legend li')].some(l => l.textContent.includes('corrected at the gauge')); const t = document.querySelector('.correction-note')?.textContent || ''; return n && k && t.startsWith('Corrected at the gauge') ? t : null",
            30,
        )
        .await;
    assert!(
        shown
            .as_str()
            .is_some_and(|t| t.contains("Levels and warnings use the raw model")),
        "{shown}"
    );
    let errors = b.page_errors(&[]).await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    s.app.stop().await;
}

/// Script: what the rating section of the first rated gauge shows.
const RATING_SECTION: &str = r#"
const s = document.querySelector('#ratings-body .rating-gauge');
if (!s) return null;
const svg = s.querySelector('svg.rating-chart');
return { gauge: s.dataset.gauge, points: svg.querySelectorAll('.gaugings .gauging').length,
         curve: svg.querySelector('.rating-curve')?.getAttribute('d') || '',
         band: svg.querySelector('.rating-band')?.getAttribute('d') || '',
         title: svg.querySelector('title')?.textContent || '', labels: svg.textContent,
         text: s.querySelector('.rating-lines').textContent,
         sections: document.querySelectorAll('#ratings-body .rating-gauge').length };
"#;

/// The references are the curve itself, Q = 10 (h − 19)^1.5 evaluated by
/// hand, and the definition of a root mean square: gaugings alternately
/// 2 % above and below the gauge's own curve, in force when they were
/// made, deviate by exactly ±2 %, so their RMS deviation is 2.0 %.
#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn rating_chart_shows_the_curve_the_gaugings_and_the_band() {
    let _one = BROWSER.lock().await;
    let reach = bridge_reach("Rating reach (invented)", "Test Bridge", "rated-gauge");
    let curve = |c: f64| json!({"kind": "power", "segments": [{"c": c, "e": 19.0, "b": 1.5}]});
    let gauge = json!({"name": "Rated stage gauge (invented)", "reach": "rating-reach", "chainage_m": 0.0,
                       "measures": "stage", "stage_min_m": 19.0, "stage_max_m": 30.0,
                       "max_rise_m_per_h": 2.0, "rating_curve": curve(10.0)});
    let s = ReachApp::start(
        |c| c.forecast.debounce_ms = 600_000,
        ("rating-reach", &reach),
        ("rated-gauge", &gauge),
    )
    .await;
    let now = chrono::Utc::now();
    let gaugings: Vec<Value> = (0..12)
        .map(|k| {
            let h = 19.4 + 0.25 * f64::from(k);
            let q = 10.0 * (h - 19.0f64).powf(1.5) * if k % 2 == 0 { 1.02 } else { 0.98 };
            let t = now - chrono::Duration::days(20) + chrono::Duration::hours(i64::from(k));
            let quality = ["excellent", "good", "fair", "poor"][k as usize % 4];
            json!({"time": t.to_rfc3339(), "stage_m": h, "discharge_m3s": q,
                   "method": "current meter", "quality": quality})
        })
        .collect();
    let key = &s.keys.forecaster;
    let posted = s
        .app
        .post_json(
            key,
            "/api/gauges/rated-gauge/gaugings",
            &json!({ "gaugings": gaugings }),
        )
        .await;
    assert_success(posted).await;
    let version = json!({"valid_from": (now - chrono::Duration::hours(1)).to_rfc3339(),
                         "curve": curve(10.5), "note": "refit after the spring gaugings (invented)"});
    let posted = s
        .app
        .post_json(key, "/api/gauges/rated-gauge/ratings", &version)
        .await;
    assert_success(posted).await;

    let b = Browser::start().await;
    b.goto(&s.app.url("/")).await;
    let shown = b.wait_for("the rating section", RATING_SECTION, 30).await;
    assert_eq!(shown["gauge"], "rated-gauge", "{shown}");
    assert_eq!(shown["sections"], 1, "{shown}");
    assert_eq!(shown["points"], 12, "one point per gauging: {shown}");
    let curve_d = shown["curve"].as_str().unwrap_or_default();
    assert!(
        curve_d.starts_with('M') && curve_d.matches('L').count() > 10,
        "{shown}"
    );
    assert!(
        shown["band"].as_str().unwrap_or_default().ends_with('Z'),
        "{shown}"
    );
    let title = shown["title"].as_str().unwrap_or_default();
    assert!(
        title.contains("version 1 in force now, 12 gaugings, band ± 2.0 %"),
        "{title}"
    );
    let labels = shown["labels"].as_str().unwrap_or_default();
    assert!(
        labels.contains("Discharge (m³/s)") && labels.contains("Stage (m)"),
        "{labels}"
    );
    let text = shown["text"].as_str().unwrap_or_default();
    assert!(text.contains("Version 1, valid from"), "{text}");
    assert!(text.contains("refit after the spring gaugings"), "{text}");
    assert!(
        text.contains("12 gaugings; RMS deviation from the curve in force at each: 2.0 %"),
        "{text}"
    );
    b.screenshot("rating-chart.png", Some("#ratings")).await;
    let errors = b
        .page_errors(&["/api/reaches/rating-reach/forecast?units=si - Failed to load resource: the server responded with a status of 404"])
        .await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    s.app.stop().await;
}

/// A reach whose only gauge measures discharge, with no rating: no chart,
/// one muted line saying so.
#[tokio::test]
#[ignore = "needs chromium and chromium-driver (apt-get install chromium chromium-driver)"]
async fn rating_section_says_so_when_no_gauge_has_a_rating() {
    let _one = BROWSER.lock().await;
    let s = bridge_app_without_forecast().await;
    let b = Browser::start().await;
    b.goto(&s.app.url("/")).await;
    let line = b
        .wait_for(
            "the no-rating line",
            "const p = document.querySelector('#ratings-body p.muted'); return p && !p.textContent.startsWith('Loading') ? p.textContent : null",
            30,
        )
        .await;
    assert_eq!(line, "No gauge on this reach has a rating curve.");
    let charts = b
        .eval("return document.querySelectorAll('#ratings-body svg').length")
        .await;
    assert_eq!(charts, 0);
    let errors = b
        .page_errors(&["/api/reaches/test-reach/forecast?units=si - Failed to load resource: the server responded with a status of 404"])
        .await;
    assert!(errors.is_empty(), "console errors: {errors:#?}");
    drop(b);
    s.app.stop().await;
}
