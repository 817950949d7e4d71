//! Shared helpers for integration tests: spawn the real application on port
//! 0 with a data directory of the test's choosing and quiet logs.
#![allow(dead_code)]

use std::{net::SocketAddr, path::Path};

use reachcast::{
    app::Application,
    config::{Config, Overrides},
};
use tokio::{sync::oneshot, task::JoinHandle};

pub struct TestApp {
    pub addr: SocketAddr,
    pub client: reqwest::Client,
    stop: Option<oneshot::Sender<()>>,
    task: Option<JoinHandle<anyhow::Result<()>>>,
}

impl TestApp {
    pub fn url(&self, path: &str) -> String {
        format!("http://{}{}", self.addr, path)
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
    let (tx, rx) = oneshot::channel::<()>();
    let task = tokio::spawn(app.run_until(async move {
        let _ = rx.await;
    }));
    TestApp {
        addr,
        client: reqwest::Client::new(),
        stop: Some(tx),
        task: Some(task),
    }
}
