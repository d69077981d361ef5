//! One writer per index. `add` (ingest and embedding) and `reindex` hold
//! the index's writer lock for their whole run; a second writer is refused
//! at once with a message naming the holder, instead of failing halfway with
//! a busy database or repeating the first one's embedding work. Readers
//! never wait for it: they search what is committed, and do not rebuild or
//! save derived indexes while a writer runs.
//!
//! The lock is an advisory file lock (`flock` on Unix) on `writer.lock` in
//! the index folder, released by the kernel when its process ends, however
//! it ends: a killed `add` never leaves a stale lock. The file also records
//! who holds it (process id, command, start time), for the message.
//!
//! Within one process the lock is re-entrant: `add` holds it across storing
//! and embedding, and the library calls it makes take it again without
//! conflict.
//!
//! invariant: while a guard is alive, no other process holds the lock on
//! the same index; a process that holds it is the only one writing the
//! store, the BM25 index or the vector files of that index.

use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};
use std::collections::HashMap;
use std::fs::{File, OpenOptions};
use std::io::{Read, Seek, Write};
use std::path::{Path, PathBuf};
use std::sync::{LazyLock, Mutex};

/// The lock file's name inside an index folder.
pub const LOCK_FILE: &str = "writer.lock";

/// Who holds an index's writer lock, as its lock file records.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Holder {
    pub pid: u32,
    /// What the holder is doing, as a reporter would say it: "`onrecord
    /// add`", "a repair of the search index"...
    pub command: String,
    /// Seconds since the Unix epoch when it took the lock.
    pub started: u64,
}

impl std::fmt::Display for Holder {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let now = now_secs();
        let ago = now.saturating_sub(self.started);
        let ago = if ago < 120 {
            format!("{ago} s ago")
        } else if ago < 7200 {
            format!("{} min ago", ago / 60)
        } else {
            format!("{:.1} h ago", ago as f64 / 3600.0)
        };
        write!(f, "{} (process {}, started {ago})", self.command, self.pid)
    }
}

fn now_secs() -> u64 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_secs())
        .unwrap_or(0)
}

/// Locks this process holds: the open file (which carries the lock) and
/// how many guards share it.
static HELD: LazyLock<Mutex<HashMap<PathBuf, (File, usize)>>> =
    LazyLock::new(|| Mutex::new(HashMap::new()));

/// The writer lock of one index, held until dropped.
#[derive(Debug)]
pub struct WriterGuard {
    key: PathBuf,
}

impl Drop for WriterGuard {
    fn drop(&mut self) {
        let mut held = HELD.lock().unwrap_or_else(|e| e.into_inner());
        if let Some(entry) = held.get_mut(&self.key) {
            entry.1 -= 1;
            if entry.1 == 0 {
                // Closing the file releases the lock.
                held.remove(&self.key);
            }
        }
    }
}

fn key(index_dir: &Path) -> PathBuf {
    index_dir
        .canonicalize()
        .unwrap_or_else(|_| index_dir.to_path_buf())
}

/// Take the writer lock of the index at `index_dir` (created if needed) for
/// `command`, or fail at once, naming the process that holds it.
pub fn acquire(index_dir: &Path, command: &str) -> Result<WriterGuard> {
    match try_acquire(index_dir, command, PATIENCE)? {
        Ok(g) => Ok(g),
        Err(holder) => Err(Error::Busy {
            path: index_dir.to_path_buf(),
            holder: holder
                .map_or_else(|| "another onrecord process".to_string(), |h| h.to_string()),
        }),
    }
}

/// How long a busy lock is tried again before it counts as held: a reader
/// checking for a writer holds a shared lock for a moment.
pub const PATIENCE: std::time::Duration = std::time::Duration::from_millis(300);

/// Take the writer lock if it is free (or already held by this process),
/// trying a busy one again for up to `patience`; otherwise say who holds
/// it, when the lock file tells.
pub fn try_acquire(
    index_dir: &Path,
    command: &str,
    patience: std::time::Duration,
) -> Result<std::result::Result<WriterGuard, Option<Holder>>> {
    std::fs::create_dir_all(index_dir).map_err(|e| Error::io(index_dir, e))?;
    let key = key(index_dir);
    let mut held = HELD.lock().unwrap_or_else(|e| e.into_inner());
    if let Some(entry) = held.get_mut(&key) {
        entry.1 += 1;
        return Ok(Ok(WriterGuard { key }));
    }
    let path = index_dir.join(LOCK_FILE);
    let mut file = OpenOptions::new()
        .read(true)
        .write(true)
        .create(true)
        .truncate(false)
        .open(&path)
        .map_err(|e| Error::io(&path, e))?;
    let deadline = std::time::Instant::now() + patience;
    loop {
        match file.try_lock() {
            Ok(()) => break,
            Err(std::fs::TryLockError::WouldBlock) if std::time::Instant::now() < deadline => {
                std::thread::sleep(std::time::Duration::from_millis(10));
            }
            Err(std::fs::TryLockError::WouldBlock) => return Ok(Err(read_holder(&path))),
            Err(std::fs::TryLockError::Error(e)) => return Err(Error::io(&path, e)),
        }
    }
    let me = Holder {
        pid: std::process::id(),
        command: command.to_string(),
        started: now_secs(),
    };
    let json = serde_json::to_vec(&me).expect("plain data serialises");
    (|| -> std::io::Result<()> {
        file.set_len(0)?;
        file.rewind()?;
        file.write_all(&json)?;
        file.flush()
    })()
    .map_err(|e| Error::io(&path, e))?;
    held.insert(key.clone(), (file, 1));
    Ok(Ok(WriterGuard { key }))
}

/// Who holds the writer lock of the index at `index_dir`, if anyone else
/// does. Never blocks and never takes the lock for longer than the test.
pub fn writer_elsewhere(index_dir: &Path) -> Option<Holder> {
    let key = key(index_dir);
    if HELD
        .lock()
        .unwrap_or_else(|e| e.into_inner())
        .contains_key(&key)
    {
        return None;
    }
    let path = index_dir.join(LOCK_FILE);
    let file = File::open(&path).ok()?;
    match file.try_lock_shared() {
        Ok(()) => None,
        Err(std::fs::TryLockError::WouldBlock) => Some(read_holder(&path).unwrap_or(Holder {
            pid: 0,
            command: "another onrecord process".into(),
            started: now_secs(),
        })),
        Err(std::fs::TryLockError::Error(_)) => None,
    }
}

fn read_holder(path: &Path) -> Option<Holder> {
    let mut s = String::new();
    File::open(path).ok()?.read_to_string(&mut s).ok()?;
    serde_json::from_str(&s).ok()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reentrant_in_one_process_and_released_on_drop() {
        let dir = tempfile::tempdir().unwrap();
        let a = acquire(dir.path(), "add").unwrap();
        let b = acquire(dir.path(), "embedding").unwrap();
        assert!(writer_elsewhere(dir.path()).is_none(), "held here");
        drop(a);
        assert_eq!(
            HELD.lock().unwrap().get(&key(dir.path())).map(|e| e.1),
            Some(1)
        );
        drop(b);
        assert!(HELD.lock().unwrap().get(&key(dir.path())).is_none());
        // The kernel lock is gone too: another open file can take it.
        let f = File::open(dir.path().join(LOCK_FILE)).unwrap();
        f.try_lock().unwrap();
    }

    #[test]
    fn a_lock_held_by_another_open_file_is_reported_with_its_holder() {
        let dir = tempfile::tempdir().unwrap();
        // Another holder: an open file description with the lock, and the
        // record it writes (as another process would).
        let path = dir.path().join(LOCK_FILE);
        std::fs::write(
            &path,
            serde_json::to_vec(&Holder {
                pid: 4242,
                command: "`onrecord add`".into(),
                started: now_secs() - 300,
            })
            .unwrap(),
        )
        .unwrap();
        let other = File::open(&path).unwrap();
        other.try_lock().unwrap();
        let err = acquire(dir.path(), "reindex").unwrap_err().to_string();
        assert!(
            err.contains("process 4242") && err.contains("5 min ago"),
            "{err}"
        );
        assert!(
            err.contains("written by `onrecord add` (process 4242"),
            "{err}"
        );
        let h = writer_elsewhere(dir.path()).unwrap();
        assert_eq!(h.pid, 4242);
        drop(other);
        assert!(writer_elsewhere(dir.path()).is_none());
        acquire(dir.path(), "reindex").unwrap();
    }
}
