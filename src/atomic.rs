//! Writing output files all at once or not at all.
//!
//! Owns the temporary-file-then-rename dance: data goes to a hidden temporary
//! file in the target's folder, which is synced and renamed over the target
//! only when the writer commits. A failed or abandoned write leaves the old
//! target (or no file) behind, never a partial one. Never decides what is
//! written.
//!
//! The temporary file lives in the same folder as the target because a
//! rename is only atomic within one file system. Its name is
//! `.NAME.tmp-vqforge-PID-N` (N counts up within the process), so concurrent
//! writers never collide and a leftover from a crash is easy to recognise.
//! Renaming replaces a symbolic link at the target path rather than writing
//! through it, and the new file gets default permissions, not the old file's.
//!
//! ```
//! use std::io::Write;
//! use vqforge::atomic::{write_atomic, AtomicFile};
//!
//! let dir = tempfile::tempdir().unwrap();
//! let path = dir.path().join("out.txt");
//! write_atomic(&path, b"first").unwrap();
//!
//! let mut file = AtomicFile::create(&path).unwrap();
//! file.write_all(b"second").unwrap();
//! drop(file); // not committed: the old content stays
//! assert_eq!(std::fs::read(&path).unwrap(), b"first");
//!
//! // A folder is not a file to write:
//! assert!(write_atomic(dir.path(), b"x").is_err());
//! ```

use std::fs::{self, File, OpenOptions};
use std::io::{self, BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use crate::error::{Error, ErrorKind, Result};

const STAGE: &str = "writing file";

/// Temporary-name attempts before giving up (names only collide with
/// leftovers of an earlier process that had the same id).
const NAME_ATTEMPTS: u32 = 100;

static NEXT_TEMP: AtomicU64 = AtomicU64::new(0);

fn io_error(path: &Path, e: io::Error) -> Error {
    Error::new(STAGE, ErrorKind::Io(e)).in_file(path.display().to_string())
}

/// A file that replaces its target only on [`AtomicFile::commit`].
///
/// Writes are buffered. Dropping it without committing deletes the temporary
/// file and leaves the target as it was.
#[derive(Debug)]
pub struct AtomicFile {
    target: PathBuf,
    temp: PathBuf,
    writer: Option<BufWriter<File>>,
}

impl AtomicFile {
    /// Starts writing a replacement for `path` by creating the temporary file
    /// beside it. Fails if `path` is a folder, has no file name, or its folder
    /// does not exist or cannot be written.
    pub fn create(path: impl AsRef<Path>) -> Result<AtomicFile> {
        let target = path.as_ref().to_path_buf();
        if target.is_dir() {
            return Err(Error::new(
                STAGE,
                ErrorKind::InvalidParameter(
                    "this is a folder, not a file; give the path of a file to write".into(),
                ),
            )
            .in_file(target.display().to_string()));
        }
        let name = target.file_name().ok_or_else(|| {
            Error::new(
                STAGE,
                ErrorKind::InvalidParameter(
                    "the path does not end in a file name; give the path of a file to write".into(),
                ),
            )
            .in_file(target.display().to_string())
        })?;
        let folder = match target.parent() {
            Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
            _ => PathBuf::from("."),
        };
        let pid = std::process::id();
        let mut last_error = None;
        for _ in 0..NAME_ATTEMPTS {
            let n = NEXT_TEMP.fetch_add(1, Ordering::Relaxed);
            let mut temp_name = std::ffi::OsString::from(".");
            temp_name.push(name);
            temp_name.push(format!(".tmp-vqforge-{pid}-{n}"));
            let temp = folder.join(temp_name);
            match OpenOptions::new().write(true).create_new(true).open(&temp) {
                Ok(file) => {
                    return Ok(AtomicFile {
                        target,
                        temp,
                        writer: Some(BufWriter::new(file)),
                    })
                }
                Err(e) if e.kind() == io::ErrorKind::AlreadyExists => last_error = Some(e),
                Err(e) => return Err(io_error(&target, e)),
            }
        }
        let e = last_error.unwrap_or_else(|| io::Error::other("no temporary file name was free"));
        Err(io_error(&target, e))
    }

    /// The path that [`AtomicFile::commit`] will replace.
    pub fn target(&self) -> &Path {
        &self.target
    }

    /// The temporary file being written.
    pub fn temp_path(&self) -> &Path {
        &self.temp
    }

    /// An I/O error from writing to this file, as a library error naming the target.
    pub fn error(&self, e: io::Error) -> Error {
        io_error(&self.target, e)
    }

    /// Flushes, syncs the data to disk and renames the temporary file over
    /// the target. On failure the temporary file is removed and the target is
    /// left as it was.
    pub fn commit(mut self) -> Result<()> {
        let writer = self
            .writer
            .take()
            .ok_or_else(|| self.error(io::Error::other("the file was already closed")))?;
        let file = writer
            .into_inner()
            .map_err(|e| io_error(&self.target, e.into_error()))?;
        file.sync_all().map_err(|e| self.error(e))?;
        drop(file);
        fs::rename(&self.temp, &self.target).map_err(|e| self.error(e))?;
        sync_folder(&self.target);
        // Renamed: nothing left for Drop to clean up.
        self.temp = PathBuf::new();
        Ok(())
    }
}

/// Makes the rename itself durable. Best effort: some file systems refuse to
/// sync a folder, and the data is already safely in place either way.
fn sync_folder(target: &Path) {
    #[cfg(unix)]
    {
        let folder = match target.parent() {
            Some(p) if !p.as_os_str().is_empty() => p,
            _ => Path::new("."),
        };
        if let Ok(dir) = File::open(folder) {
            let _ = dir.sync_all();
        }
    }
    #[cfg(not(unix))]
    let _ = target;
}

impl Write for AtomicFile {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        match self.writer.as_mut() {
            Some(w) => w.write(buf),
            None => Err(io::Error::other("the file was already closed")),
        }
    }

    fn write_all(&mut self, buf: &[u8]) -> io::Result<()> {
        match self.writer.as_mut() {
            Some(w) => w.write_all(buf),
            None => Err(io::Error::other("the file was already closed")),
        }
    }

    fn flush(&mut self) -> io::Result<()> {
        match self.writer.as_mut() {
            Some(w) => w.flush(),
            None => Ok(()),
        }
    }
}

impl Drop for AtomicFile {
    fn drop(&mut self) {
        // Close the handle first (platforms that forbid removing open files).
        self.writer = None;
        if !self.temp.as_os_str().is_empty() {
            let _ = fs::remove_file(&self.temp);
        }
    }
}

/// Replaces the file at `path` with `bytes`, atomically (see [`AtomicFile`]).
pub fn write_atomic(path: impl AsRef<Path>, bytes: &[u8]) -> Result<()> {
    write_all_atomic(&[(path.as_ref(), bytes)])
}

/// Replaces several files together: every temporary file is created and
/// written before the first is renamed, so a missing folder, a folder given
/// as a target or a failed write leaves every target as it was. (A rename
/// that fails after an earlier one succeeded cannot be undone; within one
/// file system that takes something like the disk turning read-only.)
pub fn write_all_atomic(files: &[(&Path, &[u8])]) -> Result<()> {
    let mut open = Vec::with_capacity(files.len());
    for (path, bytes) in files {
        let mut file = AtomicFile::create(path)?;
        file.write_all(bytes).map_err(|e| file.error(e))?;
        file.flush().map_err(|e| file.error(e))?;
        open.push(file);
    }
    for file in open {
        file.commit()?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn names_in(dir: &Path) -> Vec<String> {
        let mut names: Vec<String> = fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        names.sort();
        names
    }

    #[test]
    fn writes_and_replaces_without_leftovers() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("book.vqb");
        write_atomic(&path, b"one").unwrap();
        assert_eq!(fs::read(&path).unwrap(), b"one");
        write_atomic(&path, b"two, longer").unwrap();
        assert_eq!(fs::read(&path).unwrap(), b"two, longer");
        assert_eq!(names_in(dir.path()), ["book.vqb"]);
    }

    #[test]
    fn temporary_file_sits_beside_the_target() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("out.bin");
        let mut file = AtomicFile::create(&path).unwrap();
        let temp = file.temp_path().to_path_buf();
        assert_eq!(temp.parent(), Some(dir.path()));
        let prefix = format!(".out.bin.tmp-vqforge-{}-", std::process::id());
        let temp_name = temp.file_name().unwrap().to_string_lossy().into_owned();
        assert!(temp_name.starts_with(&prefix), "{temp_name}");
        file.write_all(&[7; 10_000]).unwrap();
        assert!(!path.exists(), "the target appears only on commit");
        file.commit().unwrap();
        assert_eq!(fs::read(&path).unwrap(), vec![7; 10_000]);
        assert!(!temp.exists());
    }

    #[test]
    fn drop_without_commit_removes_the_temporary_file() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("keep.txt");
        fs::write(&path, b"old").unwrap();
        {
            let mut file = AtomicFile::create(&path).unwrap();
            file.write_all(b"partial").unwrap();
        }
        assert_eq!(fs::read(&path).unwrap(), b"old");
        assert_eq!(names_in(dir.path()), ["keep.txt"]);
    }

    #[test]
    fn several_files_are_written_together_or_not_at_all() {
        let dir = tempfile::tempdir().unwrap();
        let a = dir.path().join("a.png");
        let b = dir.path().join("b.h");
        fs::write(&a, b"old a").unwrap();
        let missing = dir.path().join("no-such").join("c.bin");
        let e = write_all_atomic(&[(&a, b"new a"), (&b, b"new b"), (&missing, b"c")]).unwrap_err();
        assert_eq!(e.position().file, Some(missing.display().to_string()));
        assert_eq!(fs::read(&a).unwrap(), b"old a");
        assert_eq!(names_in(dir.path()), ["a.png"]);

        write_all_atomic(&[(&a, b"new a"), (&b, b"new b")]).unwrap();
        assert_eq!(fs::read(&a).unwrap(), b"new a");
        assert_eq!(fs::read(&b).unwrap(), b"new b");
        assert_eq!(names_in(dir.path()), ["a.png", "b.h"]);
    }

    #[test]
    fn two_writers_to_one_target_do_not_collide() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("x");
        let a = AtomicFile::create(&path).unwrap();
        let b = AtomicFile::create(&path).unwrap();
        assert_ne!(a.temp_path(), b.temp_path());
    }

    #[test]
    fn folder_target_is_refused_with_its_name() {
        let dir = tempfile::tempdir().unwrap();
        let e = write_atomic(dir.path(), b"x").unwrap_err();
        let message = e.to_string();
        assert!(message.starts_with("writing file: "), "{message}");
        assert!(message.contains(&dir.path().display().to_string()));
        assert!(message.contains("is a folder, not a file"), "{message}");
        assert_eq!(names_in(dir.path()), Vec::<String>::new());
    }

    #[test]
    fn missing_folder_is_an_io_error_naming_the_path() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("no-such-folder").join("out.bin");
        let e = write_atomic(&path, b"x").unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::Io(_)));
        assert_eq!(e.position().file, Some(path.display().to_string()));
    }

    #[test]
    fn path_without_a_file_name_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("missing").join("..");
        let e = AtomicFile::create(&path).unwrap_err();
        assert!(e.to_string().contains("does not end in a file name"), "{e}");
    }
}
