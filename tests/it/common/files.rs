//! Files of the repository that tests read: the source (to check the code
//! against documents), the dashboard's files, the invented demo.

use std::path::{Path, PathBuf};

/// `relative` inside the repository.
pub fn repo_path(relative: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(relative)
}

/// A file of the invented demo in `src/demo/`.
pub fn demo_file(name: &str) -> PathBuf {
    repo_path("src/demo").join(name)
}

/// Every file under `dir`, at any depth.
pub fn files_under(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    for entry in std::fs::read_dir(dir).unwrap_or_else(|e| panic!("{}: {e}", dir.display())) {
        let path = entry.expect("dir entry").path();
        if path.is_dir() {
            out.extend(files_under(&path));
        } else {
            out.push(path);
        }
    }
    out
}

/// The invented demo reach's description, as JSON to change in a test.
pub fn demo_reach_json() -> serde_json::Value {
    let text = std::fs::read_to_string(demo_file("brindlemoor-reach.json")).expect("demo reach");
    serde_json::from_str(&text).expect("demo reach JSON")
}
