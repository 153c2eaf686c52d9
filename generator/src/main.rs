fn main() -> std::process::ExitCode {
    arcwright::cli::main()
}
