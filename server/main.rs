fn main() -> std::process::ExitCode {
    cutpoints::cli::run()
}
