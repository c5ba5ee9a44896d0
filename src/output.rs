//! Output folders written crash-safely.
//!
//! The protocol (README, "Output folders"):
//!
//! 1. Before any work, [`preflight`] (or [`preflight_protecting`], which
//!    also refuses a destination that is or holds an input file) checks the
//!    destination: its last component is a plain folder name of at most
//!    [`MAX_NAME_BYTES`] bytes, it is not a symbolic link, no `.` or `..`
//!    follows a folder that does not exist, and it is either absent, an
//!    empty folder, or a folder that an earlier fitaudit run wrote and that
//!    holds nothing else (the marker file [`MARKER`] lists every file the
//!    run wrote; any other file, link or folder is foreign).
//! 2. [`Staging::new`] creates a hidden staging folder
//!    `.<name>.partial-<pid>.<n>` beside the destination (same file
//!    system) whose marker records the process id. Stale staging and aside
//!    folders of runs that died (their process no longer exists) and that
//!    carry the marker, or are empty, are removed first; when a dead run
//!    had moved the old folder aside and not yet moved the new one in, the
//!    old folder is put back.
//! 3. [`Staging::write`] writes and fsyncs each file; [`Staging::commit`]
//!    writes the final marker with the file list, fsyncs the folders, and
//!    swaps the staging folder with the destination in one atomic
//!    `renameat2(RENAME_EXCHANGE)` where the file system supports it (else:
//!    rename the old folder aside to `.<name>.old-<pid>.<n>`, rename the new
//!    one in), fsyncs the parent, and removes the old folder, its marker
//!    last, so that every intermediate state is recognisable as fitaudit's.
//! 4. The short sections that inspect or change the destination (stale
//!    clean-up and creation in `new`, the swap in `commit`) hold an
//!    exclusive `flock` on the parent folder, so concurrent writers to one
//!    destination wait for each other (at most [`LOCK_WAIT`], then fail
//!    with a message naming the folder); the last one to commit wins.
//!
//! A kill at any moment therefore leaves the destination holding the old
//! report or the new one, complete, and the next run clears what is left.
//!
//! Testing hooks (read only by this module, documented in the README and
//! exercised by tests/output_faults.rs):
//! `FITAUDIT_OUTPUT_FAULT=<point>` makes the process kill itself with
//! SIGKILL at a named point of writing or replacing ([`FAULT_POINTS`]), and
//! `FITAUDIT_OUTPUT_NO_EXCHANGE=1` forces the two-rename fallback.

use std::fs;
use std::io::{self, Write};
use std::path::{Component, Path, PathBuf};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;
use std::time::Duration;

/// Name of the marker file that identifies a fitaudit output folder.
pub const MARKER: &str = ".fitaudit-output";

/// First line of every marker file.
const MARKER_HEAD: &str = "written by fitaudit; this folder is replaced by the next run";

/// Longest last component of an output path, in bytes (the staging name
/// adds about 30 bytes and a file name may have at most 255).
pub const MAX_NAME_BYTES: usize = 200;

/// Longest component of an output path, in bytes (the usual file-system limit).
pub const MAX_COMPONENT_BYTES: usize = 255;

/// Longest output path, in bytes, including the current folder when the
/// path is relative (below the usual 4096-byte limit, leaving room for
/// `figures/<name>.svg`).
pub const MAX_PATH_BYTES: usize = 3800;

/// Longest wait for another fitaudit run that is replacing a folder beside
/// the same destination.
pub const LOCK_WAIT: Duration = Duration::from_secs(120);

/// Most entries an earlier output folder may hold before it is treated as
/// foreign (a report has a few dozen).
const MAX_ENTRIES: usize = 100_000;

/// File names an output folder written before the marker listed its files
/// may hold (besides `figures/*.svg`).
const LEGACY_FILES: [&str; 5] = [
    "report.html",
    "results.json",
    "summary.md",
    "bands.csv",
    "replicates.csv",
];

/// The named points of [`FITAUDIT_OUTPUT_FAULT`](self) (testing hook).
pub const FAULT_POINTS: [&str; 7] = [
    "staging-created",
    "file-written",
    "files-written",
    "before-swap",
    "after-aside",
    "after-swap",
    "removing-old",
];

/// Errors of the output layer, each naming the path concerned.
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    /// The destination exists and is not an earlier fitaudit output.
    #[error("output folder {0} exists and was not written by fitaudit; choose another --out or remove it")]
    Foreign(PathBuf),
    /// The destination is an earlier fitaudit output that also holds a
    /// file fitaudit did not write.
    #[error(
        "output folder {folder} holds {file}, which fitaudit did not write; fitaudit replaces only \
         folders holding nothing but its own files: choose another --out or move that file out"
    )]
    ForeignFile {
        /// The destination.
        folder: PathBuf,
        /// The foreign file (or link or folder).
        file: PathBuf,
    },
    /// The destination is or contains an input of the run.
    #[error(
        "output folder {folder} is or contains {input}, an input of this run; replacing the folder \
         would delete it: choose an --out outside the folders of this run's inputs (study and data \
         files, parts to merge)"
    )]
    ContainsInput {
        /// The destination.
        folder: PathBuf,
        /// The input file.
        input: PathBuf,
    },
    /// The destination exists but is a file.
    #[error("output path {0} exists and is not a folder")]
    NotAFolder(PathBuf),
    /// The destination is a symbolic link.
    #[error(
        "output path {path} is a symbolic link (to {target}); fitaudit does not replace links: \
         name the folder itself as --out"
    )]
    Symlink {
        /// The link.
        path: PathBuf,
        /// Where it points.
        target: PathBuf,
    },
    /// The destination does not end in a folder name (`.`, `..`, a root).
    #[error("output path {0} does not end in a folder name; name the folder itself (not `.` or `..`)")]
    NotAName(PathBuf),
    /// `.` or `..` after a folder that does not exist.
    #[error(
        "output path {path} steps through {missing}, which does not exist, with `.` or `..`; \
         write the path without them"
    )]
    DotsAfterMissing {
        /// The destination.
        path: PathBuf,
        /// The missing folder.
        missing: PathBuf,
    },
    /// A component or the whole path is too long.
    #[error("output path {path} is too long: {why}")]
    TooLong {
        /// The destination (shortened).
        path: String,
        /// Which limit.
        why: String,
    },
    /// Another run holds the lock beside the destination for too long.
    #[error(
        "another fitaudit run is writing beside {0} and did not finish within {secs} s; try again",
        secs = LOCK_WAIT.as_secs()
    )]
    Busy(PathBuf),
    /// A file name that would leave the output folder.
    #[error("refusing to write {0}: output file names must stay inside the output folder")]
    Escapes(String),
    /// An I/O failure.
    #[error("cannot write {path}: {source}")]
    Io {
        /// The path concerned.
        path: PathBuf,
        /// The underlying error.
        source: io::Error,
    },
}

fn io_err(path: &Path) -> impl FnOnce(io::Error) -> OutputError + '_ {
    move |source| OutputError::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// Testing hook: kills the process with SIGKILL when
/// `FITAUDIT_OUTPUT_FAULT` names `point`.
fn fault(point: &str) {
    static WANTED: std::sync::OnceLock<Option<String>> = std::sync::OnceLock::new();
    let wanted = WANTED.get_or_init(|| std::env::var("FITAUDIT_OUTPUT_FAULT").ok());
    if wanted.as_deref() == Some(point) {
        #[cfg(unix)]
        // SAFETY: kill and getpid have no memory-safety preconditions.
        unsafe {
            libc::kill(libc::getpid(), libc::SIGKILL);
        }
        std::process::abort();
    }
}

fn no_exchange() -> bool {
    std::env::var_os("FITAUDIT_OUTPUT_NO_EXCHANGE").is_some_and(|v| v == "1")
}

/// Process-wide counter that makes staging names unique within a process.
static SEQUENCE: AtomicUsize = AtomicUsize::new(0);

/// A staging folder that becomes the destination on [`Staging::commit`] and
/// disappears if dropped before.
#[derive(Debug)]
pub struct Staging {
    dest: PathBuf,
    parent: PathBuf,
    leaf: String,
    tmp: PathBuf,
    seq: usize,
    files: Mutex<Vec<String>>,
    created_parents: Vec<PathBuf>,
    committed: bool,
}

/// The folder that holds `dest` (`.` for a bare name).
fn parent_of(dest: &Path) -> PathBuf {
    match dest.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

fn leaf_of(dest: &Path) -> String {
    dest.file_name()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "out".into())
}

impl Staging {
    /// Checks the destination, clears stale folders of dead runs beside it
    /// and creates the staging folder.
    pub fn new(dest: &Path) -> Result<Staging, OutputError> {
        check_destination(dest)?;
        let parent = parent_of(dest);
        let created_parents = create_parents(&parent)?;
        let leaf = leaf_of(dest);
        let mut staging = Staging {
            dest: dest.to_path_buf(),
            parent: parent.clone(),
            leaf: leaf.clone(),
            tmp: PathBuf::new(),
            seq: 0,
            files: Mutex::new(Vec::new()),
            created_parents,
            committed: false,
        };
        {
            let _lock = DirLock::acquire(&parent)?;
            clear_stale(&parent, &leaf, dest)?;
            check_destination(dest)?;
            loop {
                let seq = SEQUENCE.fetch_add(1, Ordering::Relaxed);
                let tmp = parent.join(staging_name(&leaf, "partial", std::process::id(), seq));
                match fs::create_dir(&tmp) {
                    Ok(()) => {
                        staging.tmp = tmp;
                        staging.seq = seq;
                        break;
                    }
                    Err(e) if e.kind() == io::ErrorKind::AlreadyExists => continue,
                    Err(e) => return Err(io_err(&tmp)(e)),
                }
            }
            write_synced(&staging.tmp.join(MARKER), marker_text(&[]).as_bytes())
                .map_err(io_err(&staging.tmp))?;
        }
        fault("staging-created");
        Ok(staging)
    }

    /// The final destination.
    pub fn destination(&self) -> &Path {
        &self.dest
    }

    /// Writes `contents` to `relative` (e.g. `figures/fit.svg`) in the staging folder.
    pub fn write(&self, relative: &str, contents: &[u8]) -> Result<(), OutputError> {
        let rel = Path::new(relative);
        let inside = !relative.is_empty()
            && relative != MARKER
            && rel.components().all(|c| matches!(c, Component::Normal(_)));
        if !inside {
            return Err(OutputError::Escapes(relative.to_string()));
        }
        let path = self.tmp.join(rel);
        if let Some(dir) = path.parent() {
            fs::create_dir_all(dir).map_err(io_err(dir))?;
        }
        write_synced(&path, contents).map_err(io_err(&self.dest.join(rel)))?;
        let first = {
            let mut files = self.files.lock().unwrap_or_else(|p| p.into_inner());
            let normal: Vec<String> = rel
                .components()
                .map(|c| c.as_os_str().to_string_lossy().into_owned())
                .collect();
            files.push(normal.join("/"));
            files.len() == 1
        };
        if first {
            fault("file-written");
        }
        Ok(())
    }

    /// Moves the staging folder into place, replacing an earlier fitaudit output.
    pub fn commit(mut self) -> Result<PathBuf, OutputError> {
        fault("files-written");
        let files = self.files.lock().unwrap_or_else(|p| p.into_inner()).clone();
        write_synced(&self.tmp.join(MARKER), marker_text(&files).as_bytes()).map_err(io_err(&self.tmp))?;
        sync_tree(&self.tmp);
        let lock = DirLock::acquire(&self.parent)?;
        check_destination(&self.dest)?;
        fault("before-swap");
        let exists = fs::symlink_metadata(&self.dest).is_ok();
        if exists && !no_exchange() && exchange(&self.tmp, &self.dest).is_ok() {
            // The old folder now sits at the staging name.
            self.committed = true;
            sync_dir(&self.parent);
            fault("after-swap");
            let _ = remove_marked(&self.tmp);
        } else if exists {
            let aside = self
                .parent
                .join(staging_name(&self.leaf, "old", std::process::id(), self.seq));
            fs::rename(&self.dest, &aside).map_err(io_err(&self.dest))?;
            sync_dir(&self.parent);
            fault("after-aside");
            if let Err(e) = fs::rename(&self.tmp, &self.dest) {
                // Put the old folder back.
                let _ = fs::rename(&aside, &self.dest);
                return Err(io_err(&self.dest)(e));
            }
            self.committed = true;
            sync_dir(&self.parent);
            fault("after-swap");
            let _ = remove_marked(&aside);
        } else {
            fs::rename(&self.tmp, &self.dest).map_err(io_err(&self.dest))?;
            self.committed = true;
            sync_dir(&self.parent);
        }
        drop(lock);
        Ok(self.dest.clone())
    }
}

impl Drop for Staging {
    fn drop(&mut self) {
        if !self.committed {
            let _ = remove_marked(&self.tmp);
            for p in self.created_parents.iter().rev() {
                let _ = fs::remove_dir(p);
            }
        }
    }
}

fn staging_name(leaf: &str, kind: &str, pid: u32, seq: usize) -> String {
    format!(".{leaf}.{kind}-{pid}.{seq}")
}

/// The marker's text: the head line, this process and the files written.
fn marker_text(files: &[String]) -> String {
    let mut s = format!("{MARKER_HEAD}\npid {}\n", std::process::id());
    for f in files {
        s.push_str("file ");
        s.push_str(f);
        s.push('\n');
    }
    s
}

/// Writes a file and flushes it to the disk.
fn write_synced(path: &Path, contents: &[u8]) -> io::Result<()> {
    let mut f = fs::File::create(path)?;
    f.write_all(contents)?;
    f.sync_all()
}

/// fsyncs a folder (errors ignored: some file systems refuse it).
fn sync_dir(dir: &Path) {
    if let Ok(f) = fs::File::open(dir) {
        let _ = f.sync_all();
    }
}

/// fsyncs a folder and its sub-folders.
fn sync_tree(dir: &Path) {
    if let Ok(rd) = fs::read_dir(dir) {
        for e in rd.flatten() {
            if e.file_type().is_ok_and(|t| t.is_dir()) {
                sync_tree(&e.path());
            }
        }
    }
    sync_dir(dir);
}

/// Creates the missing folders of `parent`, returning those created
/// (outermost first) so that an abandoned run can remove them again.
fn create_parents(parent: &Path) -> Result<Vec<PathBuf>, OutputError> {
    let mut missing = Vec::new();
    let mut p = Some(parent);
    while let Some(a) = p {
        if a.as_os_str().is_empty() || fs::symlink_metadata(a).is_ok() {
            break;
        }
        missing.push(a.to_path_buf());
        p = a.parent();
    }
    missing.reverse();
    let mut created = Vec::new();
    for m in missing {
        match fs::create_dir(&m) {
            Ok(()) => created.push(m),
            Err(e) if e.kind() == io::ErrorKind::AlreadyExists => {}
            Err(e) => {
                for c in created.iter().rev() {
                    let _ = fs::remove_dir(c);
                }
                return Err(io_err(&m)(e));
            }
        }
    }
    Ok(created)
}

/// Removes a fitaudit folder with its marker last, so that a kill midway
/// leaves a folder that still carries the marker (or an empty one).
fn remove_marked(dir: &Path) -> io::Result<()> {
    let mut first = true;
    for e in fs::read_dir(dir)?.flatten() {
        if e.file_name() == MARKER {
            continue;
        }
        let p = e.path();
        if e.file_type()?.is_dir() {
            fs::remove_dir_all(&p)?;
        } else {
            fs::remove_file(&p)?;
        }
        if first {
            first = false;
            fault("removing-old");
        }
    }
    match fs::remove_file(dir.join(MARKER)) {
        Ok(()) => {}
        Err(e) if e.kind() == io::ErrorKind::NotFound => {}
        Err(e) => return Err(e),
    }
    fs::remove_dir(dir)
}

/// Parses `.<leaf>.<kind>-<pid>.<seq>`: the kind and the pid.
fn parse_staging_name<'a>(name: &'a str, leaf: &str) -> Option<(&'a str, u32)> {
    let rest = name.strip_prefix('.')?.strip_prefix(leaf)?.strip_prefix('.')?;
    let (kind, tail) = rest.split_once('-')?;
    if kind != "partial" && kind != "old" {
        return None;
    }
    let (pid, seq) = tail.split_once('.')?;
    if pid.is_empty() || seq.is_empty() || !seq.bytes().all(|b| b.is_ascii_digit()) {
        return None;
    }
    Some((kind, pid.parse().ok()?))
}

/// True while a process with this id exists.
fn alive(pid: u32) -> bool {
    if pid == std::process::id() {
        return true;
    }
    #[cfg(unix)]
    {
        let Ok(p) = libc::pid_t::try_from(pid) else {
            return false;
        };
        // SAFETY: kill with signal 0 only checks for the process.
        let r = unsafe { libc::kill(p, 0) };
        r == 0 || io::Error::last_os_error().raw_os_error() == Some(libc::EPERM)
    }
    #[cfg(not(unix))]
    {
        true
    }
}

/// True when `dir` is a folder carrying the marker, or an empty folder.
fn marked_or_empty(dir: &Path) -> bool {
    let Ok(meta) = fs::symlink_metadata(dir) else {
        return false;
    };
    if !meta.is_dir() {
        return false;
    }
    if fs::symlink_metadata(dir.join(MARKER)).is_ok_and(|m| m.is_file()) {
        return true;
    }
    fs::read_dir(dir).is_ok_and(|mut r| r.next().is_none())
}

/// Removes the staging and aside folders of dead runs beside `dest`
/// (those with the marker, or empty); restores an old folder a dead run
/// had moved aside when the destination is missing. Call under the lock.
fn clear_stale(parent: &Path, leaf: &str, dest: &Path) -> Result<(), OutputError> {
    let Ok(rd) = fs::read_dir(parent) else {
        return Ok(());
    };
    let mut stale: Vec<(PathBuf, &'static str)> = Vec::new();
    for e in rd.flatten() {
        let name = e.file_name().to_string_lossy().into_owned();
        if let Some((kind, pid)) = parse_staging_name(&name, leaf) {
            if !alive(pid) && marked_or_empty(&e.path()) {
                stale.push((e.path(), if kind == "old" { "old" } else { "partial" }));
            }
        }
    }
    if fs::symlink_metadata(dest).is_err() {
        // A dead run moved the old folder aside and did not move the new
        // one in: the old one goes back.
        if let Some(pos) = stale
            .iter()
            .position(|(p, k)| *k == "old" && p.join(MARKER).is_file())
        {
            let (old, _) = stale.remove(pos);
            fs::rename(&old, dest).map_err(io_err(dest))?;
            sync_dir(parent);
        }
    }
    for (p, _) in stale {
        remove_marked(&p).map_err(io_err(&p))?;
    }
    Ok(())
}

/// Swaps two paths atomically (Linux `renameat2(RENAME_EXCHANGE)`).
#[cfg(target_os = "linux")]
fn exchange(a: &Path, b: &Path) -> io::Result<()> {
    use std::ffi::CString;
    use std::os::unix::ffi::OsStrExt;
    let ca = CString::new(a.as_os_str().as_bytes()).map_err(io::Error::other)?;
    let cb = CString::new(b.as_os_str().as_bytes()).map_err(io::Error::other)?;
    // SAFETY: both strings are NUL-terminated and live across the call.
    let r = unsafe {
        libc::renameat2(
            libc::AT_FDCWD,
            ca.as_ptr(),
            libc::AT_FDCWD,
            cb.as_ptr(),
            libc::RENAME_EXCHANGE,
        )
    };
    if r == 0 {
        Ok(())
    } else {
        Err(io::Error::last_os_error())
    }
}

#[cfg(not(target_os = "linux"))]
fn exchange(_: &Path, _: &Path) -> io::Result<()> {
    Err(io::Error::from(io::ErrorKind::Unsupported))
}

/// An exclusive advisory lock on a folder, released on drop (and by the
/// kernel when the process dies).
struct DirLock {
    #[allow(dead_code)]
    file: Option<fs::File>,
}

impl DirLock {
    fn acquire(dir: &Path) -> Result<DirLock, OutputError> {
        #[cfg(unix)]
        {
            use std::os::unix::io::AsRawFd;
            let file = fs::File::open(dir).map_err(io_err(dir))?;
            let start = std::time::Instant::now();
            loop {
                // SAFETY: flock on a descriptor we own.
                let r = unsafe { libc::flock(file.as_raw_fd(), libc::LOCK_EX | libc::LOCK_NB) };
                if r == 0 {
                    return Ok(DirLock { file: Some(file) });
                }
                let e = io::Error::last_os_error();
                if e.raw_os_error() != Some(libc::EWOULDBLOCK) {
                    // A file system without locks: go on unlocked.
                    return Ok(DirLock { file: None });
                }
                if start.elapsed() > LOCK_WAIT {
                    return Err(OutputError::Busy(dir.to_path_buf()));
                }
                std::thread::sleep(Duration::from_millis(20));
            }
        }
        #[cfg(not(unix))]
        {
            let _ = dir;
            Ok(DirLock { file: None })
        }
    }
}

/// Checks, before any work is done, that `dest` can be written: it is new,
/// empty or an earlier fitaudit output, and its nearest existing ancestor is
/// a folder in which a staging folder can be created. Leaves nothing behind
/// except that it clears the stale folders of dead runs beside `dest`.
pub fn preflight(dest: &Path) -> Result<(), OutputError> {
    check_destination(dest)?;
    // Leftovers of dead runs beside an existing parent go first (an old
    // report a dead run had moved aside is put back), so that the checks
    // below see the destination as it should be.
    let parent = parent_of(dest);
    if fs::symlink_metadata(&parent).is_ok_and(|m| m.is_dir()) {
        let _lock = DirLock::acquire(&parent)?;
        clear_stale(&parent, &leaf_of(dest), dest)?;
        check_destination(dest)?;
    }
    let mut ancestor = dest.parent();
    while let Some(a) = ancestor {
        let a = if a.as_os_str().is_empty() {
            Path::new(".")
        } else {
            a
        };
        if a.exists() {
            if !a.is_dir() {
                return Err(OutputError::NotAFolder(a.to_path_buf()));
            }
            let probe = a.join(format!(".fitaudit-probe-{}", std::process::id()));
            fs::create_dir(&probe).map_err(io_err(a))?;
            let _ = fs::remove_dir(&probe);
            return Ok(());
        }
        ancestor = a.parent();
    }
    Ok(())
}

/// [`preflight`], and also refuses a destination that is, or contains,
/// one of `inputs` (the study file, its data file): replacing it would
/// delete them. Inputs that do not exist are skipped.
pub fn preflight_protecting(dest: &Path, inputs: &[&Path]) -> Result<(), OutputError> {
    check_inputs_outside(dest, inputs)?;
    preflight(dest)
}

/// Refuses a destination that is or contains one of `inputs`.
pub fn check_inputs_outside(dest: &Path, inputs: &[&Path]) -> Result<(), OutputError> {
    let Some(resolved) = resolve(dest) else {
        return Ok(());
    };
    for input in inputs {
        let Ok(canon) = fs::canonicalize(input) else {
            continue;
        };
        if canon.starts_with(&resolved) {
            return Err(OutputError::ContainsInput {
                folder: dest.to_path_buf(),
                input: input.to_path_buf(),
            });
        }
    }
    Ok(())
}

/// `dest` made absolute with its existing part resolved (links followed)
/// and the rest appended as written (it holds no `.` or `..`). The last
/// component is not followed even when it is a link.
fn resolve(dest: &Path) -> Option<PathBuf> {
    let parent = parent_of(dest);
    let leaf = dest.file_name()?;
    let mut missing = Vec::new();
    let mut p = parent.as_path();
    let base = loop {
        if let Ok(c) = fs::canonicalize(p) {
            break c;
        }
        missing.push(p.file_name()?.to_os_string());
        p = match p.parent() {
            Some(q) if !q.as_os_str().is_empty() => q,
            _ => Path::new("."),
        };
    };
    let mut out = base;
    for m in missing.iter().rev() {
        out.push(m);
    }
    out.push(leaf);
    Some(out)
}

/// True when the last component of `dest` is a plain folder name. `a/.`,
/// `.`, `..` and `/` are not: their staging folder would land beside the
/// wrong folder and replacing them would replace a parent.
fn ends_in_a_name(dest: &Path) -> bool {
    let text = dest.as_os_str().to_string_lossy();
    let text = text.trim_end_matches(std::path::is_separator);
    let last = text.rsplit(std::path::is_separator).next().unwrap_or("");
    !last.is_empty() && last != "." && last != ".." && dest.file_name().is_some()
}

/// A path shortened for a message.
fn short(path: &Path) -> String {
    let s = path.display().to_string();
    if s.chars().count() <= 120 {
        s
    } else {
        let head: String = s.chars().take(100).collect();
        format!("{head}... ({} bytes)", s.len())
    }
}

/// Refuses over-long names and `.` or `..` after a missing folder.
fn check_shape(dest: &Path) -> Result<(), OutputError> {
    let too_long = |why: String| OutputError::TooLong {
        path: short(dest),
        why,
    };
    let leaf_len = dest.file_name().map_or(0, |l| l.len());
    if leaf_len > MAX_NAME_BYTES {
        return Err(too_long(format!(
            "its last name has {leaf_len} bytes, more than {MAX_NAME_BYTES}"
        )));
    }
    for c in dest.components() {
        let n = c.as_os_str().len();
        if n > MAX_COMPONENT_BYTES {
            return Err(too_long(format!(
                "a folder name has {n} bytes, more than {MAX_COMPONENT_BYTES}"
            )));
        }
    }
    let mut total = dest.as_os_str().len();
    if dest.is_relative() {
        total += std::env::current_dir().map_or(0, |d| d.as_os_str().len() + 1);
    }
    if total > MAX_PATH_BYTES {
        return Err(too_long(format!(
            "{total} bytes in all, more than {MAX_PATH_BYTES}"
        )));
    }
    let mut prefix = PathBuf::new();
    let mut missing: Option<PathBuf> = None;
    for c in dest.components() {
        if let Some(m) = &missing {
            if matches!(c, Component::CurDir | Component::ParentDir) {
                return Err(OutputError::DotsAfterMissing {
                    path: dest.to_path_buf(),
                    missing: m.clone(),
                });
            }
        }
        prefix.push(c);
        if missing.is_none() && matches!(c, Component::Normal(_)) && fs::symlink_metadata(&prefix).is_err() {
            missing = Some(prefix.clone());
        }
    }
    Ok(())
}

/// Refuses destinations that do not end in a folder name, that are links,
/// too long, and those that exist and are not fitaudit output folders
/// holding only fitaudit's files.
pub fn check_destination(dest: &Path) -> Result<(), OutputError> {
    if !ends_in_a_name(dest) {
        return Err(OutputError::NotAName(dest.to_path_buf()));
    }
    check_shape(dest)?;
    let meta = match fs::symlink_metadata(dest) {
        Ok(m) => m,
        Err(_) => return Ok(()),
    };
    if meta.file_type().is_symlink() {
        return Err(OutputError::Symlink {
            path: dest.to_path_buf(),
            target: fs::read_link(dest).unwrap_or_default(),
        });
    }
    if !meta.is_dir() {
        return Err(OutputError::NotAFolder(dest.to_path_buf()));
    }
    let marker = dest.join(MARKER);
    if fs::symlink_metadata(&marker).is_ok_and(|m| m.is_file()) {
        let text = fs::read(&marker).map_err(io_err(&marker))?;
        let text = String::from_utf8_lossy(&text);
        let listed: Vec<&str> = text.lines().filter_map(|l| l.strip_prefix("file ")).collect();
        let allowed = |rel: &str| -> bool {
            if rel == MARKER {
                return true;
            }
            if !text.lines().any(|l| l.starts_with("pid ")) {
                // Written before the marker listed its files.
                return LEGACY_FILES.contains(&rel)
                    || rel
                        .strip_prefix("figures/")
                        .is_some_and(|f| !f.contains('/') && f.ends_with(".svg"));
            }
            listed.contains(&rel)
        };
        if let Some(file) = first_foreign(dest, &allowed).map_err(io_err(dest))? {
            return Err(OutputError::ForeignFile {
                folder: dest.to_path_buf(),
                file,
            });
        }
        return Ok(());
    }
    let empty = fs::read_dir(dest).map_err(io_err(dest))?.next().is_none();
    if empty {
        Ok(())
    } else {
        Err(OutputError::Foreign(dest.to_path_buf()))
    }
}

/// The first entry under `root` that is not an allowed regular file (links
/// and special files never are); folders are entered.
fn first_foreign(root: &Path, allowed: &dyn Fn(&str) -> bool) -> io::Result<Option<PathBuf>> {
    let mut stack = vec![(root.to_path_buf(), String::new())];
    let mut seen = 0usize;
    while let Some((dir, rel)) = stack.pop() {
        for e in fs::read_dir(&dir)? {
            let e = e?;
            seen += 1;
            let name = e.file_name().to_string_lossy().into_owned();
            let r = if rel.is_empty() {
                name
            } else {
                format!("{rel}/{name}")
            };
            if seen > MAX_ENTRIES {
                return Ok(Some(e.path()));
            }
            let t = e.file_type()?;
            if t.is_dir() {
                stack.push((e.path(), r));
            } else if !(t.is_file() && allowed(&r)) {
                return Ok(Some(e.path()));
            }
        }
    }
    Ok(None)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn commit_moves_everything_and_drop_leaves_nothing() {
        let root = tempfile::tempdir().unwrap();
        let dest = root.path().join("run");
        let s = Staging::new(&dest).unwrap();
        s.write("a.txt", b"1").unwrap();
        s.write("figures/b.svg", b"<svg/>").unwrap();
        assert!(!dest.exists());
        s.commit().unwrap();
        assert_eq!(fs::read(dest.join("figures/b.svg")).unwrap(), b"<svg/>");
        let marker = fs::read_to_string(dest.join(MARKER)).unwrap();
        assert!(marker.contains("file a.txt\nfile figures/b.svg\n"), "{marker}");

        // A second run replaces the first.
        let s = Staging::new(&dest).unwrap();
        s.write("c.txt", b"2").unwrap();
        s.commit().unwrap();
        assert!(dest.join("c.txt").is_file());
        assert!(!dest.join("a.txt").exists());

        // An abandoned run leaves neither a destination nor a staging folder,
        // nor the parent folders it created.
        let other = root.path().join("new/deeper/other");
        {
            let s = Staging::new(&other).unwrap();
            s.write("x.txt", b"x").unwrap();
        }
        assert!(!root.path().join("new").exists());
        let leftovers: Vec<_> = fs::read_dir(root.path()).unwrap().collect();
        assert_eq!(leftovers.len(), 1, "only the committed folder remains");
    }

    #[test]
    fn preflight_rejects_a_file_in_the_way_and_leaves_nothing() {
        let root = tempfile::tempdir().unwrap();
        let blocker = root.path().join("blocker");
        fs::write(&blocker, "x").unwrap();
        assert!(matches!(
            preflight(&blocker.join("sub/deeper")),
            Err(OutputError::NotAFolder(_))
        ));
        assert!(preflight(&root.path().join("new/deeper")).is_ok());
        assert_eq!(fs::read_dir(root.path()).unwrap().count(), 1);
    }

    #[test]
    fn refuses_foreign_folders_and_escaping_names() {
        let root = tempfile::tempdir().unwrap();
        let dest = root.path().join("data");
        fs::create_dir(&dest).unwrap();
        fs::write(dest.join("precious.csv"), "1").unwrap();
        assert!(matches!(Staging::new(&dest), Err(OutputError::Foreign(_))));
        let ok = root.path().join("ok");
        let s = Staging::new(&ok).unwrap();
        for bad in ["../x", "/etc/x", "", "a/../../x", MARKER] {
            assert!(matches!(s.write(bad, b""), Err(OutputError::Escapes(_))), "{bad}");
        }
    }

    #[test]
    fn a_marked_folder_with_a_file_fitaudit_did_not_write_is_refused() {
        let root = tempfile::tempdir().unwrap();
        let dest = root.path().join("rep");
        let s = Staging::new(&dest).unwrap();
        s.write("report.html", b"x").unwrap();
        s.commit().unwrap();
        fs::write(dest.join("study.toml"), "mine").unwrap();
        match check_destination(&dest) {
            Err(OutputError::ForeignFile { file, .. }) => assert!(file.ends_with("study.toml")),
            other => panic!("{other:?}"),
        }
        fs::remove_file(dest.join("study.toml")).unwrap();
        fs::create_dir(dest.join("figures")).unwrap();
        fs::write(dest.join("figures/mine.svg"), "x").unwrap();
        assert!(matches!(
            check_destination(&dest),
            Err(OutputError::ForeignFile { .. })
        ));
        // A folder written before the marker listed files: the fixed names only.
        let legacy = root.path().join("legacy");
        fs::create_dir_all(legacy.join("figures")).unwrap();
        fs::write(legacy.join(MARKER), format!("{MARKER_HEAD}\n")).unwrap();
        fs::write(legacy.join("report.html"), "x").unwrap();
        fs::write(legacy.join("figures/fit.svg"), "x").unwrap();
        assert!(check_destination(&legacy).is_ok());
        fs::write(legacy.join("data.csv"), "x").unwrap();
        assert!(check_destination(&legacy).is_err());
    }

    #[test]
    fn inputs_inside_the_destination_are_protected() {
        let root = tempfile::tempdir().unwrap();
        let rep = root.path().join("rep");
        fs::create_dir(&rep).unwrap();
        let study = rep.join("study.toml");
        fs::write(&study, "x").unwrap();
        assert!(matches!(
            check_inputs_outside(&rep, &[&study]),
            Err(OutputError::ContainsInput { .. })
        ));
        assert!(matches!(
            check_inputs_outside(root.path(), &[&study]),
            Err(OutputError::ContainsInput { .. })
        ));
        assert!(check_inputs_outside(&root.path().join("other"), &[&study]).is_ok());
        assert!(check_inputs_outside(&rep.join("sub"), &[&study]).is_ok());
    }

    #[test]
    fn stale_folders_of_dead_runs_are_cleared_and_live_ones_kept() {
        let root = tempfile::tempdir().unwrap();
        let dest = root.path().join("run");
        // pid 0 is never a user process; u32::MAX is no pid at all.
        let dead = root
            .path()
            .join(staging_name("run", "partial", i32::MAX as u32, 3));
        fs::create_dir(&dead).unwrap();
        fs::write(dead.join(MARKER), marker_text(&[])).unwrap();
        fs::write(dead.join("report.html"), "half").unwrap();
        let empty = root.path().join(staging_name("run", "old", i32::MAX as u32, 4));
        fs::create_dir(&empty).unwrap();
        let foreign = root
            .path()
            .join(staging_name("run", "partial", i32::MAX as u32, 5));
        fs::create_dir(&foreign).unwrap();
        fs::write(foreign.join("mine.txt"), "no marker: not ours").unwrap();
        let live = root
            .path()
            .join(staging_name("run", "partial", std::process::id(), 999_999));
        fs::create_dir(&live).unwrap();
        fs::write(live.join(MARKER), marker_text(&[])).unwrap();
        let s = Staging::new(&dest).unwrap();
        s.commit().unwrap();
        assert!(!dead.exists() && !empty.exists());
        assert!(foreign.exists() && live.exists());
    }

    #[test]
    fn an_old_folder_moved_aside_by_a_dead_run_is_restored() {
        let root = tempfile::tempdir().unwrap();
        let dest = root.path().join("run");
        let aside = root.path().join(staging_name("run", "old", i32::MAX as u32, 0));
        fs::create_dir(&aside).unwrap();
        fs::write(aside.join(MARKER), marker_text(&["report.html".into()])).unwrap();
        fs::write(aside.join("report.html"), "old").unwrap();
        let s = Staging::new(&dest).unwrap();
        // The old report is back in place before the new one replaces it.
        assert_eq!(fs::read_to_string(dest.join("report.html")).unwrap(), "old");
        s.write("report.html", b"new").unwrap();
        s.commit().unwrap();
        assert_eq!(fs::read_to_string(dest.join("report.html")).unwrap(), "new");
        assert_eq!(fs::read_dir(root.path()).unwrap().count(), 1);
    }

    #[test]
    fn staging_names_parse_back() {
        assert_eq!(
            parse_staging_name(".run.partial-12.0", "run"),
            Some(("partial", 12))
        );
        assert_eq!(parse_staging_name(".run.old-7.3", "run"), Some(("old", 7)));
        assert_eq!(parse_staging_name(".run.partial-12", "run"), None);
        assert_eq!(parse_staging_name(".runx.partial-12.0", "run"), None);
        assert_eq!(parse_staging_name(".run.other-12.0", "run"), None);
    }

    #[test]
    fn destinations_must_end_in_a_folder_name() {
        for bad in [".", "..", "a/.", "a/..", "a/./", "/", ""] {
            assert!(
                matches!(check_destination(Path::new(bad)), Err(OutputError::NotAName(_))),
                "{bad}"
            );
        }
        let root = tempfile::tempdir().unwrap();
        for ok in ["run", "run/", "a/b", ".hidden", "a.b"] {
            assert!(check_destination(&root.path().join(ok)).is_ok(), "{ok}");
        }
        assert!(matches!(
            check_destination(&root.path().join("new/../x")),
            Err(OutputError::DotsAfterMissing { .. })
        ));
        assert!(matches!(
            check_destination(&root.path().join("a".repeat(201))),
            Err(OutputError::TooLong { .. })
        ));
        assert!(matches!(
            check_destination(&root.path().join("b".repeat(300)).join("x")),
            Err(OutputError::TooLong { .. })
        ));
    }

    #[cfg(unix)]
    #[test]
    fn a_link_as_destination_is_refused() {
        let root = tempfile::tempdir().unwrap();
        let real = root.path().join("real");
        fs::create_dir(&real).unwrap();
        let link = root.path().join("link");
        std::os::unix::fs::symlink(&real, &link).unwrap();
        assert!(matches!(
            check_destination(&link),
            Err(OutputError::Symlink { .. })
        ));
        // A link among the parents is followed.
        assert!(check_destination(&link.join("sub")).is_ok());
    }
}
