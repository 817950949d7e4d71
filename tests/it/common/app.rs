//! The real application in this process: built from a test configuration
//! (port 0, the test's data directory, demo off, quiet logs), served on a
//! tokio task until `stop`, and spoken to over real HTTP.

use std::{net::SocketAddr, path::Path};

use reachcast::{
    app::Application,
    auth::{self, Role},
    config::{Config, Overrides},
    store::Store,
};
use serde_json::Value;
use tokio::{sync::oneshot, task::JoinHandle};

pub struct TestApp {
    pub addr: SocketAddr,
    pub client: reqwest::Client,
    /// The running app's store, for creating keys and inspecting writes.
    pub store: Store,
    stop: Option<oneshot::Sender<()>>,
    task: Option<JoinHandle<anyhow::Result<()>>>,
}

/// One key of each role: admin, gauge (for one gauge), forecaster.
pub struct Keys {
    pub admin: String,
    pub gauge: String,
    pub forecaster: String,
}

/// A configuration for tests: port 0, the given data directory, demo off.
pub fn test_config(data_dir: &Path) -> Config {
    let overrides = Overrides {
        bind: Some("127.0.0.1:0".to_owned()),
        data_dir: Some(data_dir.to_owned()),
    };
    let mut config = Config::load(None, Vec::new(), &overrides).expect("test config");
    config.demo.enabled = false;
    config.log.filter = "warn".to_owned();
    // Tests poll anonymously from one address faster than a person would;
    // the anonymous limit has a test of its own.
    config.auth.anonymous_rate_limit_per_sec = 100_000.0;
    config.auth.anonymous_rate_limit_burst = 100_000;
    // A debug build routes each member slowly; the ensemble tests raise it.
    config.forecast.max_ensemble_members = 4;
    config
}

pub async fn spawn_app(data_dir: &Path) -> TestApp {
    spawn_app_with(test_config(data_dir)).await
}

pub async fn spawn_app_with(config: Config) -> TestApp {
    let app = Application::build(config).await.expect("build app");
    let addr = app.local_addr().expect("local addr");
    let store = app.store().clone();
    let (tx, rx) = oneshot::channel::<()>();
    let task = tokio::spawn(app.run_until(async move {
        let _ = rx.await;
    }));
    TestApp {
        addr,
        client: reqwest::Client::new(),
        store,
        stop: Some(tx),
        task: Some(task),
    }
}

/// Opens the database of `data_dir` while no server runs, the way the
/// command line does.
pub async fn open_store(data_dir: &Path) -> Store {
    Store::open_for_maintenance(&test_config(data_dir).storage)
        .await
        .expect("open store")
}

/// Creates an API key in the database of `data_dir` the way
/// `reachcast keys create` does, and returns the full token.
pub async fn make_key(data_dir: &Path, role: &str, gauges: &[&str]) -> String {
    let store = open_store(data_dir).await;
    let key = auth::generate_key().expect("random");
    let gauges: Vec<String> = gauges.iter().map(|g| g.to_string()).collect();
    store
        .create_key(
            &key,
            &format!("test {role}"),
            role.parse().expect("role"),
            &gauges,
        )
        .await
        .expect("create key");
    store.close().await;
    key.token
}

impl TestApp {
    pub fn url(&self, path: &str) -> String {
        format!("http://{}{}", self.addr, path)
    }

    /// Creates an API key with `role` (and `gauges` for a gauge key) and
    /// returns the bearer token.
    pub async fn key(&self, role: Role, gauges: &[&str]) -> String {
        let key = auth::generate_key().expect("random key");
        let gauges: Vec<String> = gauges.iter().map(|g| g.to_string()).collect();
        self.store
            .create_key(&key, "test", role, &gauges)
            .await
            .expect("create key");
        key.token
    }

    /// One key of each role, the gauge key for `gauge`.
    pub async fn keys(&self, gauge: &str) -> Keys {
        Keys {
            admin: self.key(Role::Admin, &[]).await,
            gauge: self.key(Role::Gauge, &[gauge]).await,
            forecaster: self.key(Role::Forecaster, &[]).await,
        }
    }

    /// Asks for a graceful shutdown and waits until the server has stopped
    /// and closed the database.
    pub async fn stop(mut self) {
        if let Some(tx) = self.stop.take() {
            let _ = tx.send(());
        }
        if let Some(task) = self.task.take() {
            task.await.expect("server task").expect("server result");
        }
    }

    /// Sends `req`, failing the test with the method and URL if it cannot.
    async fn send(&self, req: reqwest::RequestBuilder) -> reqwest::Response {
        let req = req.build().expect("request");
        let what = format!("{} {}", req.method(), req.url());
        self.client
            .execute(req)
            .await
            .unwrap_or_else(|e| panic!("{what}: {e}"))
    }

    pub async fn get(&self, path: &str) -> reqwest::Response {
        self.send(self.client.get(self.url(path))).await
    }

    /// `GET` with `key` as the bearer token.
    pub async fn get_as(&self, key: &str, path: &str) -> reqwest::Response {
        self.send(self.client.get(self.url(path)).bearer_auth(key))
            .await
    }

    /// `GET` with one request header (`If-None-Match`, `Accept`, `Host`).
    pub async fn get_with(&self, path: &str, header: &str, value: &str) -> reqwest::Response {
        self.send(self.client.get(self.url(path)).header(header, value))
            .await
    }

    pub async fn get_json(&self, path: &str) -> (u16, Value) {
        let res = self.get(path).await;
        let status = res.status().as_u16();
        (status, res.json().await.expect("json body"))
    }

    /// `POST` without a body, with `key`: confirm, withdraw, run.
    pub async fn post(&self, key: &str, path: &str) -> reqwest::Response {
        self.send(self.client.post(self.url(path)).bearer_auth(key))
            .await
    }

    /// `POST` of a JSON body with `key`.
    pub async fn post_json(&self, key: &str, path: &str, body: &Value) -> reqwest::Response {
        self.send(self.client.post(self.url(path)).bearer_auth(key).json(body))
            .await
    }

    /// `PUT` of a JSON body with `key`.
    pub async fn put_json(&self, key: &str, path: &str, body: &Value) -> reqwest::Response {
        self.send(self.client.put(self.url(path)).bearer_auth(key).json(body))
            .await
    }

    pub async fn put_gauge(&self, key: &str, id: &str, body: &Value) -> reqwest::Response {
        self.put_json(key, &format!("/api/gauges/{id}"), body).await
    }

    pub async fn put_reach(&self, key: &str, id: &str, doc: &Value) -> reqwest::Response {
        self.put_json(key, &format!("/api/reaches/{id}"), doc).await
    }

    pub async fn post_readings(&self, key: &str, gauge: &str, body: &Value) -> reqwest::Response {
        self.post_json(key, &format!("/api/gauges/{gauge}/readings"), body)
            .await
    }

    pub async fn post_csv(&self, key: &str, gauge: &str, body: &str) -> reqwest::Response {
        self.post_csv_to(key, &format!("/api/gauges/{gauge}/readings"), body)
            .await
    }

    /// Posts a `text/csv` body to `path`.
    pub async fn post_csv_to(&self, key: &str, path: &str, body: &str) -> reqwest::Response {
        let req = self
            .client
            .post(self.url(path))
            .bearer_auth(key)
            .header("content-type", "text/csv")
            .body(body.to_owned());
        self.send(req).await
    }

    /// Uploads an inflow forecast (`{"reason", "series"}`) for `reach`.
    pub async fn post_inflow(&self, key: &str, reach: &str, body: &Value) -> reqwest::Response {
        self.post_json(key, &format!("/api/reaches/{reach}/inflows"), body)
            .await
    }

    /// Triggers a forecast run of `reach` and waits for it (`?wait=true`).
    pub async fn run_and_wait(&self, key: &str, reach: &str) -> reqwest::Response {
        self.post(key, &format!("/api/reaches/{reach}/runs?wait=true"))
            .await
    }
}
