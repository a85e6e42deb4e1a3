//! The binary starts and describes itself.
#[test]
fn version_and_help() {
    let bin = env!("CARGO_BIN_EXE_dosemill");
    let v = std::process::Command::new(bin).arg("--version").output().unwrap();
    assert!(v.status.success());
    assert!(String::from_utf8_lossy(&v.stdout).starts_with("dosemill "));
    let none = std::process::Command::new(bin).output().unwrap();
    assert_eq!(none.status.code(), Some(2), "no subcommand is a usage error");
}
