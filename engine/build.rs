//! Records the source revision for result files (`git_commit`), when built inside a checkout.
fn main() {
    println!("cargo:rerun-if-changed=../.git/HEAD");
    if let Ok(out) = std::process::Command::new("git").args(["rev-parse", "HEAD"]).output() {
        if out.status.success() {
            let rev = String::from_utf8_lossy(&out.stdout).trim().to_string();
            println!("cargo:rustc-env=DOSEMILL_GIT_COMMIT={rev}");
        }
    }
}
