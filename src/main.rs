fn main() {
    if let Err(e) = skerry::cli::main() {
        eprintln!("skerry: error: {e:#}");
        std::process::exit(2);
    }
}
