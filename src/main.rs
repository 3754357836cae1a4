fn main() {
    std::process::exit(cwaudit::cli::main());
}
