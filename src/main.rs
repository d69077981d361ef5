//! The `onrecord` command. All the work happens in the library; this file
//! only runs the command line and reports errors.

mod cli;

/// mimalloc: candle's CPU kernels allocate many short-lived tensors; with the
/// system allocator embedding spends much of its time in malloc and page
/// faults (eval/README.md has the figures).
#[global_allocator]
static GLOBAL: mimalloc::MiMalloc = mimalloc::MiMalloc;

use std::process::ExitCode;

fn main() -> ExitCode {
    match cli::run() {
        Ok(code) => code,
        Err(e) => {
            // A closed pipe (`onrecord find ... | head`) is not a failure.
            if e.chain().any(|c| {
                c.downcast_ref::<std::io::Error>()
                    .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe)
            }) {
                return ExitCode::SUCCESS;
            }
            eprintln!("error: {e}");
            for cause in e.chain().skip(1) {
                eprintln!("  because: {cause}");
            }
            ExitCode::from(1)
        }
    }
}
