//! The `onrecord` command. All the work happens in the library; this file
//! only runs the command line and reports errors.

mod cli;

use std::process::ExitCode;

fn main() -> ExitCode {
    match cli::run() {
        Ok(code) => code,
        Err(e) => {
            // A closed pipe (`onrecord search ... | head`) is not a failure.
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
