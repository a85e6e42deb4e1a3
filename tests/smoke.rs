#[test] fn runs() { let o = std::process::Command::new(env!("CARGO_BIN_EXE_dosemill")).output().unwrap(); assert!(o.status.success()); }
