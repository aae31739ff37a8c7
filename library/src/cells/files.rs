//! Files a session writes: never one it read as data, and never half.
//!
//! `export … draws to` and `save figure to` name a file in a cell. A typo or
//! a shared notebook could name the CSV a table was read from, and a plain
//! write would destroy the data behind the session. The session therefore
//! remembers every data file it read ([`DataFiles`]) and refuses to write
//! over one. Every write goes to a new temporary file beside the target and
//! is renamed over it ([`write_atomically`]), so a reader sees the old file
//! or the new one, never a half-written one, and a failed write leaves the
//! old file as it was.

use std::fs::OpenOptions;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

/// The files a session read as data (tables, DOT graphs), by identity.
#[derive(Debug, Default, Clone)]
pub struct DataFiles {
    files: Vec<FileIdentity>,
}

/// What makes two paths the same file: the resolved path, and on Unix the
/// device and inode (so a hard link or another spelling is caught too).
#[derive(Debug, Clone, PartialEq, Eq)]
struct FileIdentity {
    path: PathBuf,
    inode: Option<(u64, u64)>,
}

impl FileIdentity {
    /// The identity of an existing file (None when it cannot be examined).
    fn of(path: &Path) -> Option<FileIdentity> {
        let resolved = std::fs::canonicalize(path).ok()?;
        let metadata = std::fs::metadata(&resolved).ok()?;
        Some(FileIdentity { path: resolved, inode: inode_of(&metadata) })
    }

    fn same_file(&self, other: &FileIdentity) -> bool {
        self.path == other.path || (self.inode.is_some() && self.inode == other.inode)
    }
}

#[cfg(unix)]
fn inode_of(metadata: &std::fs::Metadata) -> Option<(u64, u64)> {
    use std::os::unix::fs::MetadataExt;
    Some((metadata.dev(), metadata.ino()))
}

#[cfg(not(unix))]
fn inode_of(_: &std::fs::Metadata) -> Option<(u64, u64)> {
    None
}

impl DataFiles {
    /// Remember that `path` was read as data.
    pub fn remember(&mut self, path: &Path) {
        if let Some(identity) = FileIdentity::of(path) {
            if !self.files.contains(&identity) {
                self.files.push(identity);
            }
        }
    }

    /// The data file `path` would overwrite, if any (as it was remembered).
    pub fn overwritten_by(&self, path: &Path) -> Option<&Path> {
        let target = FileIdentity::of(path)?;
        self.files.iter().find(|f| f.same_file(&target)).map(|f| f.path.as_path())
    }
}

/// Tells temporary files of one process apart.
static TEMPORARY_COUNT: AtomicU64 = AtomicU64::new(0);

/// Write `bytes` to `path` through a new temporary file in the same folder
/// and a rename over `path`. The temporary file is created exclusively (an
/// existing file or link of that name is never followed) and removed if
/// anything fails.
pub fn write_atomically(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let folder = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "output".into());
    let count = TEMPORARY_COUNT.fetch_add(1, Ordering::Relaxed);
    let temporary = folder.join(format!(".{name}.{}-{count}.partial", std::process::id()));
    let written = OpenOptions::new()
        .write(true)
        .create_new(true)
        .open(&temporary)
        .and_then(|mut file| {
            file.write_all(bytes)?;
            file.sync_all()
        })
        .and_then(|()| std::fs::rename(&temporary, path));
    if written.is_err() {
        let _ = std::fs::remove_file(&temporary);
    }
    written
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scratch(name: &str) -> PathBuf {
        let dir = std::env::temp_dir().join(format!("waypath-files-{name}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(&dir).unwrap();
        dir
    }

    #[test]
    fn a_data_file_is_recognised_under_another_spelling_and_through_a_hard_link() {
        let dir = scratch("identity");
        let csv = dir.join("orchard.csv");
        std::fs::write(&csv, "girth,yield\n1,2\n").unwrap();
        let mut data = DataFiles::default();
        data.remember(&csv);
        assert!(data.overwritten_by(&dir.join("sub/../orchard.csv")).is_none(), "sub/ does not exist");
        std::fs::create_dir(dir.join("sub")).unwrap();
        assert!(data.overwritten_by(&dir.join("sub/../orchard.csv")).is_some());
        assert!(data.overwritten_by(&dir.join("./orchard.csv")).is_some());
        #[cfg(unix)]
        {
            std::fs::hard_link(&csv, dir.join("same-trees.csv")).unwrap();
            assert!(data.overwritten_by(&dir.join("same-trees.csv")).is_some());
        }
        assert!(data.overwritten_by(&dir.join("draws.csv")).is_none(), "a new file is free");
        std::fs::write(dir.join("other.csv"), "x\n").unwrap();
        assert!(data.overwritten_by(&dir.join("other.csv")).is_none(), "a file not read as data is free");
    }

    #[test]
    fn an_atomic_write_replaces_the_file_and_leaves_no_temporary_behind() {
        let dir = scratch("atomic");
        let target = dir.join("draws.csv");
        std::fs::write(&target, "old").unwrap();
        write_atomically(&target, b"chain,draw\n1,1\n").unwrap();
        assert_eq!(std::fs::read_to_string(&target).unwrap(), "chain,draw\n1,1\n");
        let names: Vec<String> =
            std::fs::read_dir(&dir).unwrap().map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).collect();
        assert_eq!(names, vec!["draws.csv".to_string()]);
    }

    #[test]
    fn a_failed_write_keeps_the_old_file() {
        let dir = scratch("failed");
        // A folder cannot be replaced by a file: the rename fails.
        let target = dir.join("figure.svg");
        std::fs::create_dir(&target).unwrap();
        std::fs::write(target.join("kept.txt"), "kept").unwrap();
        assert!(write_atomically(&target, b"<svg/>").is_err());
        assert_eq!(std::fs::read_to_string(target.join("kept.txt")).unwrap(), "kept");
        assert_eq!(std::fs::read_dir(&dir).unwrap().count(), 1, "the temporary file was removed");
    }
}
