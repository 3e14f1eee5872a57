//! Crash-safe file writes: write a temporary file in the same directory, flush it to disk, then
//! rename it over the target, so a reader sees the old file or the new one, never half of one.

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
    tmp: PathBuf,
    path: PathBuf,
    dir: PathBuf,
}

impl AtomicWriter {
    /// Starts writing `path` (a temporary file beside it).
    pub fn create(path: &Path) -> io::Result<AtomicWriter> {
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
            tmp,
            path: path.to_path_buf(),
            dir,
        })
    }

    /// Flushes to disk and renames the temporary file over the path.
    pub fn commit(mut self) -> io::Result<()> {
        let file = self.file.take().expect("a writer commits once");
        let result = (|| {
            let file = file.into_inner().map_err(|e| e.into_error())?;
            file.sync_all()?;
            drop(file);
            fs::rename(&self.tmp, &self.path)?;
            // Make the rename itself durable (best effort: not every platform can open a
            // directory).
            if let Ok(d) = File::open(&self.dir) {
                let _ = d.sync_all();
            }
            Ok(())
        })();
        if result.is_err() {
            let _ = fs::remove_file(&self.tmp);
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
        if self.file.take().is_some() {
            let _ = fs::remove_file(&self.tmp);
        }
    }
}
