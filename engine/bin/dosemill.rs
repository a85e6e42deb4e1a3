fn main() { std::process::exit(dosemill_engine::cli::main()); }
