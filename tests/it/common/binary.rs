//! The real `reachcast` binary, for what only a separate process shows:
//! start-up failures, the command line, signals, crashes.

use std::{
    io::{BufRead, BufReader, Lines},
    path::Path,
    process::{Child, ChildStderr, Command, Output, Stdio},
};

/// The stdout of a run that must have succeeded (else its stdout and
/// stderr are the failure message).
pub fn stdout_of_success(out: &Output) -> String {
    let stdout = String::from_utf8_lossy(&out.stdout).into_owned();
    assert!(
        out.status.success(),
        "{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    stdout
}

/// The binary cargo built for these tests.
pub fn reachcast() -> Command {
    Command::new(env!("CARGO_BIN_EXE_reachcast"))
}

/// `reachcast keys ARGS --data-dir DIR`.
pub fn keys(data_dir: &Path, args: &[&str]) -> Output {
    reachcast()
        .arg("keys")
        .args(args)
        .arg("--data-dir")
        .arg(data_dir)
        .output()
        .expect("run reachcast keys")
}

/// The token `keys create` printed on its first line, after asserting that
/// it succeeded.
pub fn created_token(out: Output) -> String {
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout)
        .expect("utf-8")
        .lines()
        .next()
        .expect("token line")
        .to_owned()
}

/// A server started with `reachcast serve` on port 0.
pub struct Server {
    pub child: Child,
    /// `host:port` from its `listening` log line.
    pub addr: String,
    /// The rest of its log (stderr), line by line.
    pub log: Lines<BufReader<ChildStderr>>,
}

/// Starts `reachcast serve` on port 0 with `data_dir`, the demo off, `info`
/// logs and the extra environment `env`, and waits for its `listening` log
/// line (the server is up once it is logged).
pub fn serve(data_dir: &Path, env: &[(&str, &str)]) -> Server {
    let mut child = reachcast()
        .args(["serve", "--bind", "127.0.0.1:0", "--data-dir"])
        .arg(data_dir)
        .env("REACHCAST_DEMO_ENABLED", "false")
        .env("RUST_LOG", "info")
        .envs(env.iter().copied())
        .stderr(Stdio::piped())
        .spawn()
        .expect("spawn server");
    let stderr = child.stderr.take().expect("stderr");
    let mut log = BufReader::new(stderr).lines();
    let mut addr = None;
    for line in log.by_ref() {
        let line = strip_ansi(&line.expect("log line"));
        if line.contains("listening") {
            addr = line
                .split_whitespace()
                .find_map(|w| w.strip_prefix("addr="))
                .map(str::to_owned);
            break;
        }
    }
    let addr = addr.expect("server announced its address (`listening` with addr=)");
    Server { child, addr, log }
}

fn strip_ansi(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    let mut chars = s.chars();
    while let Some(c) = chars.next() {
        if c == '\u{1b}' {
            for d in chars.by_ref() {
                if d.is_ascii_alphabetic() {
                    break;
                }
            }
        } else {
            out.push(c);
        }
    }
    out
}
