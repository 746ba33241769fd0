//! Writing a file whole or not at all: the bytes go to a new temporary file in the destination's
//! directory, are flushed to disk, and only then take the destination's name. An existing file
//! is never replaced unless the caller allows it; a failure leaves no partial file behind.

use crate::failure::Failure;
use std::fs::{self, File, OpenOptions};
use std::io::{ErrorKind, Write};
use std::path::{Path, PathBuf};

/// Whether an existing destination may be replaced.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Existing {
    /// Refuse when the destination exists.
    Keep,
    /// Replace it.
    Replace,
}

/// Writes `bytes` to `path` whole, or leaves everything as it was.
pub fn write_whole(path: &Path, bytes: &[u8], existing: Existing) -> Result<(), Failure> {
    let dir = directory_of(path)?;
    if existing == Existing::Keep && fs::symlink_metadata(path).is_ok() {
        return Err(already_there(path));
    }
    if path.is_dir() {
        return Err(Failure::new(
            format!("{} is a directory", path.display()),
            "give a file name with --out",
        ));
    }
    let temp = TempFile::create(&dir, path)?;
    temp.fill(bytes)?;
    match existing {
        Existing::Replace => fs::rename(&temp.path, path).map_err(|e| cannot_write(path, &e))?,
        Existing::Keep => place_without_replacing(&temp.path, path)?,
    }
    temp.done();
    // Make the new name durable too; a file system that cannot sync a directory loses nothing.
    if let Ok(d) = File::open(&dir) {
        let _ = d.sync_all();
    }
    Ok(())
}

/// The directory a file goes into, which must exist.
fn directory_of(path: &Path) -> Result<PathBuf, Failure> {
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    if !dir.is_dir() {
        return Err(Failure::new(
            format!(
                "cannot write {}: directory {} does not exist",
                path.display(),
                dir.display()
            ),
            "create the directory first, or choose another --out",
        ));
    }
    Ok(dir)
}

/// Gives `temp` the name `path` unless something already has it: a hard link fails on an
/// existing name, atomically; where links are not supported, a rename after a last look.
fn place_without_replacing(temp: &Path, path: &Path) -> Result<(), Failure> {
    match fs::hard_link(temp, path) {
        Ok(()) => {
            let _ = fs::remove_file(temp);
            Ok(())
        }
        Err(e) if e.kind() == ErrorKind::AlreadyExists => Err(already_there(path)),
        Err(_) if fs::symlink_metadata(path).is_ok() => Err(already_there(path)),
        Err(_) => fs::rename(temp, path).map_err(|e| cannot_write(path, &e)),
    }
}

fn already_there(path: &Path) -> Failure {
    Failure::new(
        format!("{} already exists", path.display()),
        "pass --force to replace it, or choose another --out",
    )
}

fn cannot_write(path: &Path, e: &std::io::Error) -> Failure {
    Failure::new(
        format!("cannot write {}: {e}", path.display()),
        "nothing was written; check the directory is writable and has space",
    )
}

/// A temporary file beside the destination, removed on drop unless it was placed.
struct TempFile {
    path: PathBuf,
    file: Option<File>,
    placed: bool,
}

impl TempFile {
    /// A new file `.NAME.PID.N.part` in `dir` (never one that exists).
    fn create(dir: &Path, destination: &Path) -> Result<TempFile, Failure> {
        let name = destination
            .file_name()
            .map_or("out".into(), |n| n.to_string_lossy().into_owned());
        let mut last_error = None;
        for attempt in 0..100 {
            let path = dir.join(format!(".{name}.{}.{attempt}.part", std::process::id()));
            match OpenOptions::new().write(true).create_new(true).open(&path) {
                Ok(file) => {
                    return Ok(TempFile {
                        path,
                        file: Some(file),
                        placed: false,
                    })
                }
                Err(e) if e.kind() == ErrorKind::AlreadyExists => continue,
                Err(e) => {
                    last_error = Some(e);
                    break;
                }
            }
        }
        let e = last_error.unwrap_or_else(|| ErrorKind::AlreadyExists.into());
        Err(cannot_write(destination, &e))
    }

    /// Writes the bytes and flushes them to disk.
    fn fill(&self, bytes: &[u8]) -> Result<(), Failure> {
        let mut file = self.file.as_ref().expect("open until placed");
        file.write_all(bytes)
            .and_then(|()| file.sync_all())
            .map_err(|e| cannot_write(&self.path, &e))
    }

    /// The file has its final name; nothing to clean up.
    fn done(mut self) {
        self.file = None;
        self.placed = true;
    }
}

impl Drop for TempFile {
    fn drop(&mut self) {
        self.file = None;
        if !self.placed {
            let _ = fs::remove_file(&self.path);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn leftovers(dir: &Path) -> Vec<String> {
        fs::read_dir(dir)
            .expect("dir")
            .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
            .filter(|n| n.ends_with(".part"))
            .collect()
    }

    #[test]
    fn writes_a_new_file_and_leaves_no_temporary_file() {
        let dir = tempfile::tempdir().expect("dir");
        let path = dir.path().join("page.html");
        write_whole(&path, b"<p>one</p>", Existing::Keep).expect("written");
        assert_eq!(fs::read(&path).expect("read"), b"<p>one</p>");
        assert!(leftovers(dir.path()).is_empty());
    }

    #[test]
    fn refuses_to_replace_an_existing_file_unless_allowed() {
        let dir = tempfile::tempdir().expect("dir");
        let path = dir.path().join("page.html");
        fs::write(&path, b"kept").expect("write");
        let refused = write_whole(&path, b"new", Existing::Keep).expect_err("refused");
        assert!(
            refused.render().contains("already exists"),
            "{}",
            refused.render()
        );
        assert_eq!(fs::read(&path).expect("read"), b"kept");
        assert!(leftovers(dir.path()).is_empty());
        write_whole(&path, b"new", Existing::Replace).expect("replaced");
        assert_eq!(fs::read(&path).expect("read"), b"new");
        assert!(leftovers(dir.path()).is_empty());
    }

    #[test]
    fn refuses_a_missing_directory_with_what_to_do() {
        let dir = tempfile::tempdir().expect("dir");
        let path = dir.path().join("no-such-dir").join("page.html");
        let refused = write_whole(&path, b"x", Existing::Replace).expect_err("refused");
        assert!(refused.render().contains("does not exist"));
        assert!(refused.render().contains("hint:"));
    }
}
