//! Crash-safe file writes: write a temporary file in the same directory, flush it to disk, then
//! rename it over the target, so a reader sees the old file or the new one, never half of one.
//!
//! A path that names something other than a regular file (a device such as `/dev/null` or
//! `/dev/stdout`, a named pipe) is written in place: renaming a file over it would replace the
//! device itself. A symbolic link is followed, so the link stays and the file it points to is
//! replaced.

use std::fs::{self, File};
use std::io::{self, Write};
use std::path::{Path, PathBuf};

/// Writes `bytes` to `path` atomically (temporary file, fsync, rename, fsync of the directory).
pub fn write_atomic(path: &Path, bytes: &[u8]) -> io::Result<()> {
    let mut w = AtomicWriter::create(path)?;
    w.write_all(bytes)?;
    w.commit()
}

/// A file written piece by piece that appears at its path only when [`AtomicWriter::commit`]
/// succeeds: until then the old file (if any) stays as it was, and a writer dropped without
/// commit removes its temporary file.
pub struct AtomicWriter {
    file: Option<io::BufWriter<File>>,
    /// Where the bytes go before commit; `None` when the path is written in place.
    tmp: Option<PathBuf>,
    path: PathBuf,
    dir: PathBuf,
}

/// True when `path` exists and is neither a regular file nor a folder (after following links):
/// a device or a named pipe, written in place rather than replaced.
pub fn is_special_file(path: &Path) -> bool {
    fs::metadata(path).is_ok_and(|m| !m.is_file() && !m.is_dir())
}

impl AtomicWriter {
    /// Starts writing `path` (a temporary file beside it).
    pub fn create(path: &Path) -> io::Result<AtomicWriter> {
        if is_special_file(path) {
            let file = fs::OpenOptions::new().write(true).open(path)?;
            return Ok(AtomicWriter {
                file: Some(io::BufWriter::with_capacity(1 << 16, file)),
                tmp: None,
                path: path.to_path_buf(),
                dir: PathBuf::new(),
            });
        }
        // Replace the file a link points to, not the link.
        let resolved;
        let path = if fs::symlink_metadata(path).is_ok_and(|m| m.file_type().is_symlink()) {
            resolved = fs::canonicalize(path)?;
            resolved.as_path()
        } else {
            path
        };
        let dir = match path.parent() {
            Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
            _ => PathBuf::from("."),
        };
        let name = path
            .file_name()
            .ok_or_else(|| io::Error::new(io::ErrorKind::InvalidInput, "path has no file name"))?;
        let tmp = dir.join(format!(
            ".{}.{}.tmp",
            name.to_string_lossy(),
            std::process::id()
        ));
        let file = File::create(&tmp)?;
        Ok(AtomicWriter {
            file: Some(io::BufWriter::with_capacity(1 << 16, file)),
            tmp: Some(tmp),
            path: path.to_path_buf(),
            dir,
        })
    }

    /// Flushes to disk and renames the temporary file over the path.
    pub fn commit(mut self) -> io::Result<()> {
        let file = self.file.take().expect("a writer commits once");
        let Some(tmp) = self.tmp.take() else {
            return file.into_inner().map(drop).map_err(|e| e.into_error());
        };
        let result = (|| {
            let file = file.into_inner().map_err(|e| e.into_error())?;
            file.sync_all()?;
            drop(file);
            fs::rename(&tmp, &self.path)?;
            // Make the rename itself durable (best effort: not every platform can open a
            // directory).
            if let Ok(d) = File::open(&self.dir) {
                let _ = d.sync_all();
            }
            Ok(())
        })();
        if result.is_err() {
            let _ = fs::remove_file(&tmp);
        }
        result
    }
}

impl Write for AtomicWriter {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        self.file.as_mut().expect("not committed").write(buf)
    }

    fn flush(&mut self) -> io::Result<()> {
        self.file.as_mut().expect("not committed").flush()
    }
}

impl Drop for AtomicWriter {
    fn drop(&mut self) {
        if let (Some(_), Some(tmp)) = (self.file.take(), &self.tmp) {
            let _ = fs::remove_file(tmp);
        }
    }
}

#[cfg(all(test, unix))]
mod tests {
    use super::*;
    use std::io::Read;

    fn scratch(name: &str) -> PathBuf {
        let d = std::env::temp_dir().join(format!("relume-atomic-{name}-{}", std::process::id()));
        let _ = fs::remove_dir_all(&d);
        fs::create_dir_all(&d).unwrap();
        d
    }

    #[test]
    fn a_named_pipe_is_written_in_place_and_stays_a_pipe() {
        let d = scratch("fifo");
        let fifo = d.join("out");
        let made = std::process::Command::new("mkfifo")
            .arg(&fifo)
            .status()
            .unwrap();
        assert!(made.success());
        let reader = {
            let fifo = fifo.clone();
            std::thread::spawn(move || {
                let mut text = String::new();
                File::open(&fifo)
                    .unwrap()
                    .read_to_string(&mut text)
                    .unwrap();
                text
            })
        };
        write_atomic(&fifo, b"through the pipe").unwrap();
        // Checked before joining: a pipe replaced by a file would leave the reader waiting.
        use std::os::unix::fs::FileTypeExt;
        assert!(fs::metadata(&fifo).unwrap().file_type().is_fifo());
        assert_eq!(reader.join().unwrap(), "through the pipe");
        // No temporary file was left beside it.
        assert_eq!(fs::read_dir(&d).unwrap().count(), 1);
        let _ = fs::remove_dir_all(&d);
    }

    #[test]
    fn a_link_stays_a_link_and_its_file_is_replaced() {
        let d = scratch("link");
        let file = d.join("real.txt");
        let link = d.join("link.txt");
        fs::write(&file, "old").unwrap();
        std::os::unix::fs::symlink(&file, &link).unwrap();
        write_atomic(&link, b"new").unwrap();
        assert!(fs::symlink_metadata(&link)
            .unwrap()
            .file_type()
            .is_symlink());
        assert_eq!(fs::read_to_string(&file).unwrap(), "new");
        let _ = fs::remove_dir_all(&d);
    }

    #[test]
    fn an_uncommitted_writer_leaves_the_old_file() {
        let d = scratch("drop");
        let file = d.join("a.txt");
        fs::write(&file, "old").unwrap();
        {
            let mut w = AtomicWriter::create(&file).unwrap();
            w.write_all(b"half").unwrap();
        }
        assert_eq!(fs::read_to_string(&file).unwrap(), "old");
        assert_eq!(fs::read_dir(&d).unwrap().count(), 1);
        let _ = fs::remove_dir_all(&d);
    }
}
