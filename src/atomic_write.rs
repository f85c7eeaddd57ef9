//! Writing a file so that no reader, crash or signal ever sees half of it.
//!
//! Every output goes to a temporary file in the target folder and is renamed over the final
//! name once complete (a rename within one file system is atomic on POSIX). What is left to
//! handle, and handled here in one place for every command:
//!
//! * **Names.** Temporaries are called `.grove-tmp-PID@HOST~N`: hidden, without an image
//!   extension (so no folder scan takes one for an input or an output), and telling which
//!   process made them, so a later run can tell a dead process's leftovers from a live one's
//!   (shards of one batch may write into the same folder at the same time).
//! * **Signals.** SIGINT and SIGTERM are handled by one thread (see [`install_signal_cleanup`])
//!   that deletes the temporaries in flight, then lets the signal end the process as usual.
//! * **Leftovers.** SIGKILL or a power cut cannot be caught; the first write into a folder
//!   removes temporaries there whose process is gone (same host) or that are over a day old.
//! * **Mode.** The file is created with mode 0666, which the OS reduces by the umask, like any
//!   other program's output (a private temporary-file mode would survive the rename).

use std::collections::HashSet;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Mutex, OnceLock};

use crate::error::{GroveError, Result};

/// File-name prefix of grove's temporaries.
pub const TEMP_PREFIX: &str = ".grove-tmp-";

/// Leftovers from another host (or unparsable names) are removed after this long: their
/// process cannot be checked, and no single output takes a day to write.
const FOREIGN_TEMP_AGE: std::time::Duration = std::time::Duration::from_secs(24 * 3600);

/// Temporaries this process has created and not yet renamed or removed.
fn in_flight() -> &'static Mutex<Vec<PathBuf>> {
    static IN_FLIGHT: OnceLock<Mutex<Vec<PathBuf>>> = OnceLock::new();
    IN_FLIGHT.get_or_init(|| Mutex::new(Vec::new()))
}

/// Folders already swept for stale temporaries by this process.
fn swept() -> &'static Mutex<HashSet<PathBuf>> {
    static SWEPT: OnceLock<Mutex<HashSet<PathBuf>>> = OnceLock::new();
    SWEPT.get_or_init(|| Mutex::new(HashSet::new()))
}

fn host_name() -> &'static str {
    static HOST: OnceLock<String> = OnceLock::new();
    HOST.get_or_init(|| {
        std::fs::read_to_string("/proc/sys/kernel/hostname")
            .or_else(|_| std::fs::read_to_string("/etc/hostname"))
            .map(|h| h.trim().replace(['@', '~', '/'], "_"))
            .unwrap_or_default()
    })
}

/// True for names of grove's temporary files (which must never be read as data).
pub fn is_temp_name(name: &std::ffi::OsStr) -> bool {
    name.as_encoded_bytes().starts_with(TEMP_PREFIX.as_bytes())
}

fn temp_path(dir: &Path) -> PathBuf {
    static COUNTER: AtomicU64 = AtomicU64::new(0);
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    dir.join(format!(
        "{TEMP_PREFIX}{}@{}~{n}",
        std::process::id(),
        host_name()
    ))
}

/// Removes the temporary on drop unless the rename happened (errors, panics).
struct TempGuard {
    path: PathBuf,
    armed: bool,
}

impl Drop for TempGuard {
    fn drop(&mut self) {
        if self.armed {
            let _ = std::fs::remove_file(&self.path);
        }
        let mut list = in_flight().lock().unwrap_or_else(|p| p.into_inner());
        if let Some(i) = list.iter().position(|p| p == &self.path) {
            list.swap_remove(i);
        }
    }
}

/// Writes `bytes` to `path` via a temporary file in the same folder and a rename, so readers
/// never see a partial file; the folder is created if needed and swept of stale temporaries.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    std::fs::create_dir_all(dir).map_err(|e| GroveError::write(dir, e))?;
    sweep_once(dir);
    let tmp = temp_path(dir);
    // Registered before it exists, so a signal arriving in between still finds it.
    in_flight()
        .lock()
        .unwrap_or_else(|p| p.into_inner())
        .push(tmp.clone());
    let mut guard = TempGuard {
        path: tmp.clone(),
        armed: false,
    };
    let mut file = create_new(&tmp).map_err(|e| GroveError::write(path, e))?;
    guard.armed = true;
    file.write_all(bytes)
        .and_then(|()| file.sync_all())
        .map_err(|e| GroveError::write(path, e))?;
    drop(file);
    std::fs::rename(&tmp, path).map_err(|e| GroveError::write(path, e))?;
    guard.armed = false;
    Ok(())
}

/// A file written in pieces (a streamed label map of a huge image) under the same rules as
/// [`write_atomic`]: it lives under a temporary name until [`AtomicFile::commit`] renames it;
/// dropped without a commit (an error, a panic) it is removed.
pub struct AtomicFile {
    path: PathBuf,
    file: std::fs::File,
    guard: TempGuard,
}

impl AtomicFile {
    pub fn create(path: &Path) -> Result<AtomicFile> {
        let dir = path
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or(Path::new("."));
        std::fs::create_dir_all(dir).map_err(|e| GroveError::write(dir, e))?;
        sweep_once(dir);
        let tmp = temp_path(dir);
        in_flight()
            .lock()
            .unwrap_or_else(|p| p.into_inner())
            .push(tmp.clone());
        let mut guard = TempGuard {
            path: tmp.clone(),
            armed: false,
        };
        let file = create_new(&tmp).map_err(|e| GroveError::write(path, e))?;
        guard.armed = true;
        Ok(AtomicFile {
            path: path.to_path_buf(),
            file,
            guard,
        })
    }

    /// The final path (for error messages).
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// A second handle on the temporary file, for encoders that take ownership of a writer.
    pub fn handle(&self) -> Result<std::fs::File> {
        self.file
            .try_clone()
            .map_err(|e| GroveError::write(&self.path, e))
    }

    /// The last `n` bytes written so far (to check that an encoder finished its file).
    pub fn tail(&self, n: usize) -> Result<Vec<u8>> {
        use std::io::{Read, Seek, SeekFrom};
        let mut f =
            std::fs::File::open(&self.guard.path).map_err(|e| GroveError::write(&self.path, e))?;
        let mut buf = vec![0u8; n];
        f.seek(SeekFrom::End(-(n as i64)))
            .and_then(|_| f.read_exact(&mut buf))
            .map_err(|e| GroveError::write(&self.path, e))?;
        Ok(buf)
    }

    /// Flushes to disk and renames the temporary over the final name.
    pub fn commit(mut self) -> Result<()> {
        self.file
            .sync_all()
            .map_err(|e| GroveError::write(&self.path, e))?;
        std::fs::rename(&self.guard.path, &self.path)
            .map_err(|e| GroveError::write(&self.path, e))?;
        self.guard.armed = false;
        Ok(())
    }
}

#[cfg(unix)]
fn create_new(path: &Path) -> std::io::Result<std::fs::File> {
    use std::os::unix::fs::OpenOptionsExt;
    std::fs::OpenOptions::new()
        .write(true)
        .create_new(true)
        .mode(0o666)
        .open(path)
}

#[cfg(not(unix))]
fn create_new(path: &Path) -> std::io::Result<std::fs::File> {
    std::fs::OpenOptions::new()
        .write(true)
        .create_new(true)
        .open(path)
}

fn sweep_once(dir: &Path) {
    let key = dir.canonicalize().unwrap_or_else(|_| dir.to_path_buf());
    if swept()
        .lock()
        .unwrap_or_else(|p| p.into_inner())
        .insert(key)
    {
        remove_stale_temporaries(dir);
    }
}

/// Removes grove temporaries in `dir` left by processes that no longer run; returns how many.
/// Temporaries of live processes (another shard writing here) are left alone.
pub fn remove_stale_temporaries(dir: &Path) -> usize {
    let Ok(rd) = std::fs::read_dir(dir) else {
        return 0;
    };
    let mut removed = 0;
    for entry in rd.flatten() {
        let name = entry.file_name();
        if !is_temp_name(&name) {
            continue;
        }
        let stale = match parse_owner(&name.to_string_lossy()) {
            Some((pid, host)) if host == host_name() => {
                pid != std::process::id() && !process_alive(pid)
            }
            _ => entry
                .metadata()
                .and_then(|m| m.modified())
                .ok()
                .and_then(|t| t.elapsed().ok())
                .is_some_and(|age| age > FOREIGN_TEMP_AGE),
        };
        if stale && std::fs::remove_file(entry.path()).is_ok() {
            removed += 1;
        }
    }
    removed
}

/// `(pid, host)` from `.grove-tmp-PID@HOST~N`.
fn parse_owner(name: &str) -> Option<(u32, &str)> {
    let rest = name.strip_prefix(TEMP_PREFIX)?;
    let (pid, rest) = rest.split_once('@')?;
    let (host, _) = rest.rsplit_once('~')?;
    Some((pid.parse().ok()?, host))
}

#[cfg(unix)]
fn process_alive(pid: u32) -> bool {
    let Ok(pid) = libc::pid_t::try_from(pid) else {
        return false;
    };
    // SAFETY: signal 0 only checks that the process exists; nothing is sent.
    let r = unsafe { libc::kill(pid, 0) };
    r == 0 || std::io::Error::last_os_error().raw_os_error() != Some(libc::ESRCH)
}

#[cfg(not(unix))]
fn process_alive(_pid: u32) -> bool {
    true
}

/// Deletes the temporaries in flight. Called on SIGINT/SIGTERM; the lock is kept so no new
/// temporary is started while the process ends.
fn remove_in_flight() -> std::sync::MutexGuard<'static, Vec<PathBuf>> {
    let list = in_flight().lock().unwrap_or_else(|p| p.into_inner());
    for p in list.iter() {
        let _ = std::fs::remove_file(p);
    }
    list
}

/// Routes SIGINT and SIGTERM to one thread that removes the temporaries in flight and then
/// ends the process by the same signal (so the exit status still says "interrupted").
///
/// Must be called before any other thread starts: the signals are blocked in the calling
/// thread, and threads inherit that mask, so only the waiting thread ever receives them (no
/// work is done inside an asynchronous signal handler).
#[cfg(unix)]
pub fn install_signal_cleanup() {
    // SAFETY: plain libc calls on a locally owned, initialised signal set.
    unsafe {
        let mut set: libc::sigset_t = std::mem::zeroed();
        libc::sigemptyset(&mut set);
        libc::sigaddset(&mut set, libc::SIGINT);
        libc::sigaddset(&mut set, libc::SIGTERM);
        if libc::pthread_sigmask(libc::SIG_BLOCK, &set, std::ptr::null_mut()) != 0 {
            return;
        }
        let spawned = std::thread::Builder::new()
            .name("grove-signals".into())
            .spawn(move || {
                let mut sig: libc::c_int = 0;
                if libc::sigwait(&set, &mut sig) != 0 {
                    return;
                }
                let _held = remove_in_flight();
                libc::signal(sig, libc::SIG_DFL);
                let mut one: libc::sigset_t = std::mem::zeroed();
                libc::sigemptyset(&mut one);
                libc::sigaddset(&mut one, sig);
                libc::pthread_sigmask(libc::SIG_UNBLOCK, &one, std::ptr::null_mut());
                libc::raise(sig);
                libc::_exit(128 + sig);
            });
        if spawned.is_err() {
            libc::pthread_sigmask(libc::SIG_UNBLOCK, &set, std::ptr::null_mut());
        }
    }
}

#[cfg(not(unix))]
pub fn install_signal_cleanup() {}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn writes_honour_the_umask_and_leave_no_temporary() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("sub/out.bin");
        write_atomic(&path, b"abc").unwrap();
        write_atomic(&path, b"abcd").unwrap();
        assert_eq!(std::fs::read(&path).unwrap(), b"abcd");
        let names: Vec<_> = std::fs::read_dir(path.parent().unwrap())
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(names, vec![std::ffi::OsString::from("out.bin")]);
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            // SAFETY: reading the umask requires setting it; it is restored at once.
            let mask = unsafe {
                let m = libc::umask(0o022);
                libc::umask(m);
                m
            };
            let mode = std::fs::metadata(&path).unwrap().permissions().mode() & 0o777;
            assert_eq!(mode, 0o666 & !(mask as u32), "mode {mode:o}");
        }
    }

    #[test]
    fn stale_temporaries_of_dead_processes_are_removed_live_ones_kept() {
        let dir = tempfile::tempdir().unwrap();
        // A pid far above Linux's pid_max (4194304) never runs.
        let dead = dir
            .path()
            .join(format!("{TEMP_PREFIX}999999999@{}~0", host_name()));
        let live = dir.path().join(format!(
            "{TEMP_PREFIX}{}@{}~0",
            std::process::id(),
            host_name()
        ));
        let foreign_new = dir.path().join(format!("{TEMP_PREFIX}1@elsewhere~0"));
        for p in [&dead, &live, &foreign_new] {
            std::fs::write(p, b"x").unwrap();
        }
        assert_eq!(remove_stale_temporaries(dir.path()), 1);
        assert!(!dead.exists() && live.exists() && foreign_new.exists());
    }

    #[test]
    fn owner_is_parsed_from_the_name() {
        assert_eq!(
            parse_owner(".grove-tmp-42@node-7.cluster~3"),
            Some((42, "node-7.cluster"))
        );
        assert_eq!(parse_owner(".grove-tmp-abcdef"), None);
    }
}
