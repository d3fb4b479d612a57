//! GeoPackage files as containers: new files built under a temporary name,
//! recovery after a crash, and the per-job lock.
//!
//! - **New files** are built as `.<name>.tmp-<pid>` in the target's
//!   directory and renamed into place only when complete, so a failure (or a
//!   kill) never leaves a partial file under the real name. Temporary files
//!   of processes that are gone are removed by the next write to the
//!   directory.
//! - **Crash recovery.** A process killed while writing leaves a hot
//!   rollback journal (`<file>-journal`). SQLite rolls it back on the next
//!   read-write open only; a read-only connection cannot, and fails. So a
//!   file with a journal is opened read-write once first
//!   (`recover_hot_journal`), which restores it as it was before the
//!   interrupted write (SQLite documentation, "Atomic Commit In SQLite",
//!   section "Hot Rollback Journals").
//! - **One run per job** (`JobLock`): a POSIX byte-range lock (`fcntl`,
//!   which also works on network file systems that support locking) on one
//!   byte of the side file `.<name>.geofold-lock`, at an offset given by the
//!   job's name. The lock goes when its process ends, however it ends; so a
//!   `running` row whose job lock nobody holds belongs to a process that is
//!   gone.

use std::fs;
use std::path::{Path, PathBuf};

use rusqlite::{Connection, OpenFlags};

use super::{connect, file_error, sqlite_error};
use crate::error::{Error, FileProblem};

/// A file being built under a temporary name next to its final path; removed
/// on drop unless [`NewFile::finish`] renamed it into place.
pub(crate) struct NewFile {
    temp: PathBuf,
    target: PathBuf,
    finished: bool,
}

/// The directory a file at `path` lives in (`.` for a bare name).
pub(crate) fn directory_of(path: &Path) -> PathBuf {
    match path.parent() {
        Some(parent) if !parent.as_os_str().is_empty() => parent.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// True when process `pid` exists on this machine (Linux `/proc`; elsewhere
/// every process counts as alive, so nothing is removed by mistake).
pub(crate) fn process_alive(pid: u32) -> bool {
    if !Path::new("/proc/self").exists() {
        return true;
    }
    Path::new(&format!("/proc/{pid}")).exists()
}

/// Removes temporary files for `target` left by processes that are gone.
fn remove_leftovers(directory: &Path, name: &str) {
    let prefix = format!(".{name}.tmp-");
    let Ok(entries) = fs::read_dir(directory) else {
        return;
    };
    for entry in entries.flatten() {
        let file = entry.file_name().to_string_lossy().into_owned();
        let Some(rest) = file.strip_prefix(&prefix) else {
            continue;
        };
        let pid = rest.trim_end_matches("-journal");
        if let Ok(pid) = pid.parse::<u32>() {
            if pid != std::process::id() && !process_alive(pid) {
                tracing::info!(
                    file,
                    "removing a temporary file left by a process that is gone"
                );
                let _ = fs::remove_file(entry.path());
            }
        }
    }
}

impl NewFile {
    /// Starts a new file for `target` and opens it.
    ///
    /// # Errors
    /// Exit 73 when the directory does not exist or cannot be written.
    pub(crate) fn create(target: &Path) -> Result<(NewFile, Connection), Error> {
        let directory = directory_of(target);
        if !directory.is_dir() {
            return Err(file_error(
                target,
                format!(
                    "cannot create: directory {} does not exist",
                    directory.display()
                ),
                FileProblem::CannotCreate,
            ));
        }
        let name = target
            .file_name()
            .map(|name| name.to_string_lossy().into_owned())
            .unwrap_or_else(|| "geofold.gpkg".to_string());
        remove_leftovers(&directory, &name);
        let temp = directory.join(format!(".{name}.tmp-{}", std::process::id()));
        let file = NewFile {
            temp,
            target: target.to_path_buf(),
            finished: false,
        };
        file.remove_temp();
        let conn = connect(
            &file.temp,
            OpenFlags::SQLITE_OPEN_READ_WRITE
                | OpenFlags::SQLITE_OPEN_CREATE
                | OpenFlags::SQLITE_OPEN_NO_MUTEX
                | OpenFlags::SQLITE_OPEN_URI,
        )
        .map_err(|error| match error {
            Error::File { problem, .. } => file_error(target, problem, FileProblem::CannotCreate),
            other => other,
        })?;
        Ok((file, conn))
    }

    /// Closes the connection, flushes the file and renames it into place.
    ///
    /// # Errors
    /// Exit 74 when flushing or renaming fails (the temporary file is removed).
    pub(crate) fn finish(mut self, conn: Connection) -> Result<(), Error> {
        conn.close()
            .map_err(|(_, e)| sqlite_error(&self.target, "closing the new file", &e))?;
        let io = |action: &str, error: std::io::Error| {
            file_error(&self.target, format!("{action}: {error}"), FileProblem::Io)
        };
        fs::File::open(&self.temp)
            .and_then(|file| file.sync_all())
            .map_err(|e| io("flushing the new file", e))?;
        fs::rename(&self.temp, &self.target)
            .map_err(|e| io("moving the new file into place", e))?;
        self.finished = true;
        // Make the rename durable; not all file systems allow it, which is harmless.
        let _ = fs::File::open(directory_of(&self.target)).and_then(|d| d.sync_all());
        Ok(())
    }

    fn remove_temp(&self) {
        let _ = fs::remove_file(&self.temp);
        let mut journal = self.temp.clone().into_os_string();
        journal.push("-journal");
        let _ = fs::remove_file(journal);
    }
}

impl Drop for NewFile {
    fn drop(&mut self) {
        if !self.finished {
            self.remove_temp();
        }
    }
}

/// Rolls back a hot journal left by an interrupted write, by opening the
/// file read-write once (see the module doc). A no-op without a journal.
///
/// # Errors
/// Exit 77 when the file cannot be opened for writing, which the rollback needs.
pub(crate) fn recover_hot_journal(path: &Path) -> Result<(), Error> {
    let mut journal = path.as_os_str().to_owned();
    journal.push("-journal");
    let hot = fs::metadata(&journal).map(|m| m.len() > 0).unwrap_or(false);
    if !hot {
        return Ok(());
    }
    tracing::warn!(
        path = %path.display(),
        "the file has the journal of an interrupted write; rolling it back"
    );
    let conn = Connection::open_with_flags(
        path,
        OpenFlags::SQLITE_OPEN_READ_WRITE | OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )
    .map_err(|e| {
        sqlite_error(
            path,
            "opening the file to roll back an interrupted write",
            &e,
        )
    })?;
    // Any read takes the shared lock that makes SQLite roll the journal back.
    conn.query_row("SELECT count(*) FROM sqlite_master", [], |row| {
        row.get::<_, i64>(0)
    })
    .map_err(|e| {
        let error = sqlite_error(path, "rolling back an interrupted write", &e);
        match error {
            Error::File {
                problem,
                kind: FileProblem::Permission,
                path,
            } => Error::File {
                path,
                problem: format!(
                    "{problem}; the file has the journal of an interrupted write, which only a \
                         read-write open can roll back"
                ),
                kind: FileProblem::Permission,
            },
            other => other,
        }
    })?;
    Ok(())
}

/// The per-job lock of a results file (see the module doc).
pub(crate) struct JobLock {
    file: fs::File,
}

/// The lock file of a results GeoPackage.
fn lock_path(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map(|name| name.to_string_lossy().into_owned())
        .unwrap_or_default();
    directory_of(path).join(format!(".{name}.geofold-lock"))
}

/// The byte a job locks: an FNV-1a hash of its name folded into 2³⁰ slots.
fn job_offset(job: &str) -> i64 {
    let key = crate::adapters::postgis::migrate::lock_key(job) as u64;
    (key % (1 << 30)) as i64
}

impl JobLock {
    /// Opens (creating) the lock file of the results file at `path`.
    ///
    /// # Errors
    /// Exit 73 when the lock file cannot be created.
    pub(crate) fn open(path: &Path) -> Result<JobLock, Error> {
        let lock = lock_path(path);
        let file = fs::OpenOptions::new()
            .read(true)
            .write(true)
            .create(true)
            .truncate(false)
            .open(&lock)
            .map_err(|e| {
                file_error(
                    &lock,
                    format!("cannot create the lock file of {}: {e}", path.display()),
                    FileProblem::CannotCreate,
                )
            })?;
        Ok(JobLock { file })
    }

    /// Tries to take (`lock`) or release the byte of `job`; true on success.
    fn set(&self, job: &str, lock: bool) -> bool {
        use std::os::unix::io::AsRawFd;
        let offset = job_offset(job);
        // SAFETY: a zeroed `flock` is a valid value of the C struct; every
        // field that matters is set below, and the descriptor is open for the
        // life of `self.file`.
        let mut region: libc::flock = unsafe { std::mem::zeroed() };
        region.l_type = if lock { libc::F_WRLCK } else { libc::F_UNLCK } as _;
        region.l_whence = libc::SEEK_SET as _;
        region.l_start = offset as _;
        region.l_len = 1;
        // SAFETY: F_SETLK with a pointer to a valid `flock` on an open descriptor.
        let result = unsafe { libc::fcntl(self.file.as_raw_fd(), libc::F_SETLK, &region) };
        result == 0
    }

    /// Takes the lock of `job` without waiting; false when another process holds it.
    pub(crate) fn try_lock(&self, job: &str) -> bool {
        self.set(job, true)
    }

    /// Releases the lock of `job`.
    pub(crate) fn unlock(&self, job: &str) {
        let _ = self.set(job, false);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_job_lock_held_by_another_process_is_seen_and_freed_when_it_ends() {
        // POSIX locks are per process: the other holder is a child process
        // (flock(1) cannot take byte ranges, so the child is python3's fcntl).
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("r.gpkg");
        let lock = JobLock::open(&path).unwrap();
        assert!(lock.try_lock("a"));
        lock.unlock("a");
        let offset = job_offset("a");
        let script = format!(
            "import fcntl,sys,time\nf=open({:?},'r+')\nfcntl.lockf(f, fcntl.LOCK_EX|fcntl.LOCK_NB, 1, {offset})\nprint('held',flush=True)\ntime.sleep(30)\n",
            lock_path(&path)
        );
        let mut child = std::process::Command::new("python3")
            .args(["-c", &script])
            .stdout(std::process::Stdio::piped())
            .spawn()
            .unwrap();
        let mut line = String::new();
        std::io::BufRead::read_line(
            &mut std::io::BufReader::new(child.stdout.take().unwrap()),
            &mut line,
        )
        .unwrap();
        assert_eq!(line.trim(), "held");
        assert!(!lock.try_lock("a"), "the child holds job a");
        assert!(lock.try_lock("b"), "other jobs are free");
        child.kill().unwrap();
        child.wait().unwrap();
        assert!(lock.try_lock("a"), "the lock went with the child");
    }
}
