//! Shared helpers for integration tests: spawn the real application on port
//! 0 with a data directory of the test's choosing and quiet logs.
#![allow(dead_code)]

pub mod xml;

use std::{net::SocketAddr, path::Path};

use reachcast::{
    app::Application,
    config::{Config, Overrides},
};
use tokio::{sync::oneshot, task::JoinHandle};

pub struct TestApp {
    pub addr: SocketAddr,
    pub client: reqwest::Client,
    /// The running app's store, for creating keys and inspecting writes.
    pub store: reachcast::store::Store,
    stop: Option<oneshot::Sender<()>>,
    task: Option<JoinHandle<anyhow::Result<()>>>,
}

impl TestApp {
    pub fn url(&self, path: &str) -> String {
        format!("http://{}{}", self.addr, path)
    }

    /// Creates an API key with `role` (and `gauges` for a gauge key) and
    /// returns the bearer token.
    pub async fn key(&self, role: reachcast::auth::Role, gauges: &[&str]) -> String {
        let key = reachcast::auth::generate_key().expect("random key");
        let gauges: Vec<String> = gauges.iter().map(|g| g.to_string()).collect();
        self.store
            .create_key(&key, "test", role, &gauges)
            .await
            .expect("create key");
        key.token
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

/// Creates an API key in the database of `data_dir` the way
/// `reachcast keys create` does, and returns the full token.
pub async fn make_key(data_dir: &Path, role: &str, gauges: &[&str]) -> String {
    use reachcast::{auth, store::Store};
    let config = test_config(data_dir);
    let store = Store::open_for_maintenance(&config.storage)
        .await
        .expect("open store");
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

/// A gauge description for tests: stage 0..10 m, 1 m/h, both quantities.
pub fn gauge_body(name: &str) -> serde_json::Value {
    serde_json::json!({
        "name": name,
        "measures": "both",
        "stage_min_m": 0.0,
        "stage_max_m": 10.0,
        "max_rise_m_per_h": 1.0,
        "discharge_max_m3s": 500.0,
    })
}

impl TestApp {
    pub async fn put_gauge(
        &self,
        key: &str,
        id: &str,
        body: &serde_json::Value,
    ) -> reqwest::Response {
        self.client
            .put(self.url(&format!("/api/gauges/{id}")))
            .bearer_auth(key)
            .json(body)
            .send()
            .await
            .expect("PUT gauge")
    }

    pub async fn post_readings(
        &self,
        key: &str,
        gauge: &str,
        body: &serde_json::Value,
    ) -> reqwest::Response {
        self.client
            .post(self.url(&format!("/api/gauges/{gauge}/readings")))
            .bearer_auth(key)
            .json(body)
            .send()
            .await
            .expect("POST readings")
    }

    pub async fn post_csv(&self, key: &str, gauge: &str, body: &str) -> reqwest::Response {
        self.client
            .post(self.url(&format!("/api/gauges/{gauge}/readings")))
            .bearer_auth(key)
            .header("content-type", "text/csv")
            .body(body.to_owned())
            .send()
            .await
            .expect("POST csv")
    }

    pub async fn get_json(&self, path: &str) -> (u16, serde_json::Value) {
        let res = self.client.get(self.url(path)).send().await.expect("GET");
        let status = res.status().as_u16();
        (status, res.json().await.expect("json body"))
    }
}
