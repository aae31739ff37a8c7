//! The folder through which tables and draws travel between the session and
//! a Rust cell.
//!
//! It holds copies of the session's data, so it is private: made fresh
//! (never an existing folder) with an unpredictable name, readable by its
//! owner only (mode 0700), and removed when the Rust context ends, when the
//! kernel shuts down or restarts ([`remove_exchange_folders`]), or when
//! the process drops it.

use std::collections::hash_map::RandomState;
use std::hash::{BuildHasher, Hasher};
use std::path::{Path, PathBuf};
use std::sync::Mutex;

/// Folders made by this process and not yet removed.
static LIVE: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());

/// A private exchange folder, removed on drop.
pub struct Exchange {
    path: PathBuf,
}

impl Exchange {
    /// Make a new private folder under the system's temporary folder.
    pub fn create() -> Result<Exchange, String> {
        let base = std::env::temp_dir();
        let mut last_error = None;
        for _ in 0..16 {
            let path = base.join(format!("waypath-exchange-{:016x}", unpredictable()));
            match make_private_dir(&path) {
                Ok(()) => {
                    LIVE.lock().unwrap_or_else(|p| p.into_inner()).push(path.clone());
                    return Ok(Exchange { path });
                }
                Err(e) => last_error = Some(e),
            }
        }
        Err(format!(
            "cannot make a private exchange folder for Rust cells under {}: {}",
            base.display(),
            last_error.map(|e| e.to_string()).unwrap_or_default()
        ))
    }

    pub fn path(&self) -> &Path {
        &self.path
    }
}

impl Drop for Exchange {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.path);
        LIVE.lock().unwrap_or_else(|p| p.into_inner()).retain(|p| p != &self.path);
    }
}

/// Remove every exchange folder this process made (the kernel calls this
/// before it exits on a shutdown or restart request, which skips drops).
pub fn remove_exchange_folders() {
    for path in LIVE.lock().unwrap_or_else(|p| p.into_inner()).drain(..) {
        let _ = std::fs::remove_dir_all(path);
    }
}

/// 64 bits from the standard library's randomly keyed hasher, mixed with
/// the clock and the process id.
fn unpredictable() -> u64 {
    let mut hasher = RandomState::new().build_hasher();
    hasher.write_u32(std::process::id());
    hasher.write_u128(std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map(|d| d.as_nanos()).unwrap_or(0));
    hasher.finish()
}

/// `create_dir` (not `create_dir_all`): an existing folder is an error, so
/// a folder someone else made is never used.
#[cfg(unix)]
fn make_private_dir(path: &Path) -> std::io::Result<()> {
    use std::os::unix::fs::DirBuilderExt;
    std::fs::DirBuilder::new().mode(0o700).create(path)
}

#[cfg(not(unix))]
fn make_private_dir(path: &Path) -> std::io::Result<()> {
    std::fs::create_dir(path)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exchange_folders_are_private_fresh_and_removed() {
        let one = Exchange::create().expect("a folder");
        let two = Exchange::create().expect("another folder");
        assert_ne!(one.path(), two.path(), "names must not repeat");
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let mode = std::fs::metadata(one.path()).expect("exists").permissions().mode();
            assert_eq!(mode & 0o777, 0o700, "owner-only permissions, got {mode:o}");
        }
        // An existing folder is never taken over.
        assert!(make_private_dir(one.path()).is_err());
        let kept = two.path().to_path_buf();
        drop(one);
        remove_exchange_folders();
        assert!(!kept.exists(), "remove_exchange_folders removes what is live");
        drop(two);
    }
}
