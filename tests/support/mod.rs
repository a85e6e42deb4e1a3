//! Helpers shared by the top-level tests that drive the real binary.
#![allow(dead_code)]

use std::path::{Path, PathBuf};

/// A scratch folder, removed when the test passes (kept for inspection when it fails).
pub struct Scratch(pub PathBuf);

impl std::ops::Deref for Scratch {
    type Target = Path;
    fn deref(&self) -> &Path {
        &self.0
    }
}

impl Drop for Scratch {
    fn drop(&mut self) {
        if !std::thread::panicking() {
            let _ = std::fs::remove_dir_all(&self.0);
        }
    }
}

/// A fresh scratch folder `dosemill-<name>-<pid>` in the system's temporary folder.
pub fn scratch_named(name: &str) -> Scratch {
    let p = std::env::temp_dir().join(format!("dosemill-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&p);
    std::fs::create_dir_all(&p).unwrap();
    Scratch(p)
}
