//! `envord ... | head`: when the reader of standard output goes away, the
//! command stops quietly with exit 0 instead of a "Broken pipe" panic.
//!
//! Rust ignores SIGPIPE, so a write to a closed pipe fails with `EPIPE`:
//! explicit writes map it to [`CliError::StdoutClosed`](crate::error::CliError),
//! and `println!` panics with a message this module recognises. The panic
//! hook stays silent for that panic only; `main` turns it into exit 0.

use std::any::Any;

/// True for the panic `println!` raises on a closed standard output.
pub fn is_closed_stdout_panic(payload: &(dyn Any + Send)) -> bool {
    let msg = payload
        .downcast_ref::<String>()
        .map(String::as_str)
        .or_else(|| payload.downcast_ref::<&str>().copied())
        .unwrap_or("");
    msg.starts_with("failed printing to stdout") && msg.contains("Broken pipe")
}

/// Installs a panic hook that is silent for a closed standard output and
/// reports every other panic as before.
pub fn install_quiet_hook() {
    let previous = std::panic::take_hook();
    std::panic::set_hook(Box::new(move |info| {
        if !is_closed_stdout_panic(info.payload()) {
            previous(info);
        }
    }));
}
