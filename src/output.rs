//! Output folders written atomically.
//!
//! Every file of a run goes into a hidden staging folder beside the
//! destination; only when all of them are written is the staging folder
//! renamed into place. A failed run therefore leaves no folder at all, and a
//! reader never sees a half-written report. A destination that exists is
//! replaced only when it carries the marker file of an earlier fitaudit run;
//! any other folder is refused, so a mistyped `--out` cannot destroy data.

use std::fs;
use std::io;
use std::path::{Component, Path, PathBuf};

/// Name of the marker file that identifies a fitaudit output folder.
pub const MARKER: &str = ".fitaudit-output";

/// Errors of the output layer, each naming the path concerned.
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    /// The destination exists and is not an earlier fitaudit output.
    #[error("output folder {0} exists and was not written by fitaudit; choose another --out or remove it")]
    Foreign(PathBuf),
    /// The destination exists but is a file.
    #[error("output path {0} exists and is not a folder")]
    NotAFolder(PathBuf),
    /// The destination does not end in a folder name (`.`, `..`, a root).
    #[error("output path {0} does not end in a folder name; name the folder itself (not `.` or `..`)")]
    NotAName(PathBuf),
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

/// A staging folder that becomes the destination on [`Staging::commit`] and
/// disappears if dropped before.
#[derive(Debug)]
pub struct Staging {
    dest: PathBuf,
    tmp: PathBuf,
    committed: bool,
}

impl Staging {
    /// Checks the destination and creates the staging folder beside it.
    pub fn new(dest: &Path) -> Result<Staging, OutputError> {
        check_destination(dest)?;
        let parent = match dest.parent() {
            Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
            _ => PathBuf::from("."),
        };
        fs::create_dir_all(&parent).map_err(io_err(&parent))?;
        let leaf = dest
            .file_name()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| "out".into());
        let tmp = parent.join(format!(".{leaf}.partial-{}", std::process::id()));
        if tmp.exists() {
            fs::remove_dir_all(&tmp).map_err(io_err(&tmp))?;
        }
        fs::create_dir(&tmp).map_err(io_err(&tmp))?;
        fs::write(
            tmp.join(MARKER),
            "written by fitaudit; this folder is replaced by the next run\n",
        )
        .map_err(io_err(&tmp))?;
        Ok(Staging {
            dest: dest.to_path_buf(),
            tmp,
            committed: false,
        })
    }

    /// The final destination.
    pub fn destination(&self) -> &Path {
        &self.dest
    }

    /// Writes `contents` to `relative` (e.g. `figures/fit.svg`) in the staging folder.
    pub fn write(&self, relative: &str, contents: &[u8]) -> Result<(), OutputError> {
        let rel = Path::new(relative);
        let inside = !relative.is_empty() && rel.components().all(|c| matches!(c, Component::Normal(_)));
        if !inside {
            return Err(OutputError::Escapes(relative.to_string()));
        }
        let path = self.tmp.join(rel);
        if let Some(dir) = path.parent() {
            fs::create_dir_all(dir).map_err(io_err(dir))?;
        }
        fs::write(&path, contents).map_err(io_err(&self.dest.join(rel)))
    }

    /// Moves the staging folder into place, replacing an earlier fitaudit output.
    pub fn commit(mut self) -> Result<PathBuf, OutputError> {
        check_destination(&self.dest)?;
        if self.dest.exists() {
            fs::remove_dir_all(&self.dest).map_err(io_err(&self.dest))?;
        }
        fs::rename(&self.tmp, &self.dest).map_err(io_err(&self.dest))?;
        self.committed = true;
        Ok(self.dest.clone())
    }
}

impl Drop for Staging {
    fn drop(&mut self) {
        if !self.committed {
            let _ = fs::remove_dir_all(&self.tmp);
        }
    }
}

/// Checks, before any work is done, that `dest` can be written: it is new,
/// empty or an earlier fitaudit output, and its nearest existing ancestor is
/// a folder in which a staging folder can be created. Leaves nothing behind.
pub fn preflight(dest: &Path) -> Result<(), OutputError> {
    check_destination(dest)?;
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

/// True when the last component of `dest` is a plain folder name. `a/.`,
/// `.`, `..` and `/` are not: their staging folder would land beside the
/// wrong folder and replacing them would replace a parent.
fn ends_in_a_name(dest: &Path) -> bool {
    let text = dest.as_os_str().to_string_lossy();
    let text = text.trim_end_matches(std::path::is_separator);
    let last = text.rsplit(std::path::is_separator).next().unwrap_or("");
    !last.is_empty() && last != "." && last != ".." && dest.file_name().is_some()
}

/// Refuses destinations that do not end in a folder name, and those that
/// exist and are not fitaudit output folders.
pub fn check_destination(dest: &Path) -> Result<(), OutputError> {
    if !ends_in_a_name(dest) {
        return Err(OutputError::NotAName(dest.to_path_buf()));
    }
    if !dest.exists() {
        return Ok(());
    }
    if !dest.is_dir() {
        return Err(OutputError::NotAFolder(dest.to_path_buf()));
    }
    if dest.join(MARKER).is_file() {
        return Ok(());
    }
    let empty = fs::read_dir(dest).map_err(io_err(dest))?.next().is_none();
    if empty {
        Ok(())
    } else {
        Err(OutputError::Foreign(dest.to_path_buf()))
    }
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
        assert!(dest.join(MARKER).is_file());

        // A second run replaces the first.
        let s = Staging::new(&dest).unwrap();
        s.write("c.txt", b"2").unwrap();
        s.commit().unwrap();
        assert!(dest.join("c.txt").is_file());
        assert!(!dest.join("a.txt").exists());

        // An abandoned run leaves neither a destination nor a staging folder.
        let other = root.path().join("other");
        {
            let s = Staging::new(&other).unwrap();
            s.write("x.txt", b"x").unwrap();
        }
        assert!(!other.exists());
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
        for bad in ["../x", "/etc/x", "", "a/../../x"] {
            assert!(matches!(s.write(bad, b""), Err(OutputError::Escapes(_))), "{bad}");
        }
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
    }
}
