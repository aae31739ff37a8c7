//! The thread cells run on, and the guard around each cell.
//!
//! The library's parsers recurse (nested parentheses in conditions and
//! mechanisms, nested braces in DOT files) and limit their depth; a thread
//! with the operating system's default stack (8 MiB for the main thread,
//! 2 MiB for others) would overflow before those limits are reached, and a
//! stack overflow ends the whole process. Cells therefore run on one thread
//! with [`CELL_STACK_BYTES`] of stack, reserved but only paid for as deep
//! recursion touches it. A panic in a cell (a defect, never expected) is
//! caught by [`guarded`] and becomes that cell's error; the session is kept.

use std::panic::{catch_unwind, AssertUnwindSafe};

/// Stack of the cell thread: room for parser recursion far beyond the
/// library's depth limits (thousands of levels at a few KiB each).
pub const CELL_STACK_BYTES: usize = 512 << 20;

/// Start `work` on a new thread named `name` with the cell stack.
pub fn spawn<T, F>(name: &str, work: F) -> std::io::Result<std::thread::JoinHandle<T>>
where
    F: FnOnce() -> T + Send + 'static,
    T: Send + 'static,
{
    std::thread::Builder::new().name(name.to_string()).stack_size(CELL_STACK_BYTES).spawn(work)
}

/// Run `work` on a cell thread and wait for its result. A panic inside is
/// returned as its message.
pub fn run<T, F>(work: F) -> Result<T, String>
where
    F: FnOnce() -> T + Send,
    T: Send,
{
    std::thread::scope(|scope| {
        let handle = std::thread::Builder::new()
            .name("waypath-cells".to_string())
            .stack_size(CELL_STACK_BYTES)
            .spawn_scoped(scope, work)
            .map_err(|e| format!("cannot start the cell thread ({e})"))?;
        handle.join().map_err(|panic| panic_text(panic.as_ref()))
    })
}

/// Run `work`, turning a panic into its message.
pub fn guarded<T>(work: impl FnOnce() -> T) -> Result<T, String> {
    catch_unwind(AssertUnwindSafe(work)).map_err(|panic| panic_text(panic.as_ref()))
}

/// The message a panic carried ("an internal error" when it is not text).
fn panic_text(panic: &(dyn std::any::Any + Send)) -> String {
    panic
        .downcast_ref::<String>()
        .cloned()
        .or_else(|| panic.downcast_ref::<&str>().map(|s| s.to_string()))
        .unwrap_or_else(|| "an internal error".into())
}

/// What a cell that panicked reports: one sentence, the session kept.
pub fn internal_error_message(what: &str) -> String {
    format!("the cell stopped on an internal error ({what}); the session is kept, please report this cell")
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Recursion depth `n`, each level holding `frame` bytes on the stack.
    fn recurse(n: usize) -> usize {
        let frame = [n as u8; 1024];
        if n == 0 {
            return frame[0] as usize;
        }
        std::hint::black_box(&frame);
        recurse(n - 1) + std::hint::black_box(frame[7]) as usize % 2
    }

    #[test]
    fn the_cell_thread_holds_recursion_that_overflows_a_default_thread() {
        // 64 Ki levels of >= 1 KiB each need more than 64 MiB, far past the
        // 2 MiB of a default spawned thread (Rust std::thread docs).
        let depth = 64 * 1024;
        assert!(run(|| recurse(depth)).is_ok());
    }

    #[test]
    fn a_panic_becomes_its_message() {
        assert_eq!(guarded(|| -> u8 { panic!("orchard row {}", 3) }), Err("orchard row 3".to_string()));
        assert_eq!(run(|| -> u8 { panic!("stream gauge") }), Err("stream gauge".to_string()));
        assert_eq!(guarded(|| 5), Ok(5));
    }
}
