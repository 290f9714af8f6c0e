//! Result files: `sweep.csv`, `pick.json`, written whole or not at all
//! (a temporary name in the same folder, renamed when complete).

use std::fs;
use std::io::Write;
use std::path::Path;

use crate::error::Error;

/// The folder `path` is written in (`.` for a bare name), created if missing.
pub(crate) fn folder_of(path: &Path) -> std::io::Result<&Path> {
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    fs::create_dir_all(dir)?;
    Ok(dir)
}

/// Write `bytes` to `path` through a temporary file in the same folder and
/// a rename, so a reader never sees a half-written file under the final
/// name.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), Error> {
    let err = |e: std::io::Error| Error::Output {
        path: path.display().to_string(),
        message: e.to_string(),
    };
    let dir = folder_of(path).map_err(err)?;
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_default();
    let tmp = dir.join(format!(".{name}.partial-{}", std::process::id()));
    let result = (|| {
        let mut f = fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        fs::rename(&tmp, path)
    })();
    if result.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    result.map_err(err)
}

/// Name of the lock file a run holds in its output folder.
pub const LOCK_FILE: &str = ".looprate.lock";

/// One output folder, one run: an exclusive lock on `DIR/.looprate.lock`
/// held while a run writes there (the operating system drops it when the
/// process ends, however it ends, so a killed run never leaves a stale
/// lock). Taking it also removes the temporary files of runs that died
/// mid-write (`.NAME.partial-PID`, `.NAME.PID-N.tmp.png`).
#[derive(Debug)]
pub struct OutputLock {
    _file: fs::File,
}

impl OutputLock {
    /// Create `dir` if needed and take its lock, or fail at once naming
    /// the folder when another run holds it.
    pub fn acquire(dir: &Path) -> Result<OutputLock, Error> {
        let err = |message: String| Error::Output {
            path: dir.display().to_string(),
            message,
        };
        fs::create_dir_all(dir).map_err(|e| err(e.to_string()))?;
        let path = dir.join(LOCK_FILE);
        let file = fs::OpenOptions::new()
            .create(true)
            .truncate(false)
            .write(true)
            .open(&path)
            .map_err(|e| err(format!("cannot open the lock file {}: {e}", path.display())))?;
        match file.try_lock() {
            Ok(()) => {}
            Err(fs::TryLockError::WouldBlock) => {
                return Err(err(
                    "another looprate run is writing to this folder; wait for it or give another --out"
                        .into(),
                ));
            }
            Err(fs::TryLockError::Error(e)) => {
                return Err(err(format!("cannot lock {}: {e}", path.display())));
            }
        }
        remove_stale_temporaries(dir);
        Ok(OutputLock { _file: file })
    }
}

/// The process id a temporary file name of ours carries, if it is one:
/// `.NAME.partial-PID` (`write_atomic`) or `.NAME.PID-N.tmp.png` (charts).
pub fn temporary_owner(name: &str) -> Option<u32> {
    if !name.starts_with('.') {
        return None;
    }
    if let Some((_, pid)) = name.rsplit_once(".partial-") {
        return pid.parse().ok();
    }
    let stem = name.strip_suffix(".tmp.png")?;
    let (_, tail) = stem.rsplit_once('.')?;
    let (pid, n) = tail.split_once('-')?;
    n.parse::<u64>().ok()?;
    pid.parse().ok()
}

/// Remove the temporaries of runs no longer alive (under the folder's lock
/// no other run writes here; a process id still alive is left alone, in
/// case a single-file command such as `eval --trace` is writing). Best
/// effort: a file that cannot be removed is left.
fn remove_stale_temporaries(dir: &Path) {
    let Ok(entries) = fs::read_dir(dir) else {
        return;
    };
    let me = std::process::id();
    for entry in entries.flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        let Some(pid) = temporary_owner(&name) else {
            continue;
        };
        if pid != me && !process_alive(pid) {
            let _ = fs::remove_file(entry.path());
        }
    }
}

/// Whether a process id is running (Linux `/proc`; elsewhere every other
/// process counts as gone, which the folder lock makes safe for the runs
/// that take it).
fn process_alive(pid: u32) -> bool {
    Path::new("/proc/self").exists() && Path::new(&format!("/proc/{pid}")).exists()
}
