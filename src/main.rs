fn main() {
    std::process::exit(cairn::cli::main());
}
