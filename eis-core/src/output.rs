//! Output files: one writer for every file the toolkit writes, library and command line alike.
//!
//! A regular file (or a name not yet taken) is written atomically: into a temporary file beside the
//! target, flushed to disk, then renamed over the target, so that a reader sees the old or the new
//! file, never half of one. Nothing else is ever renamed over:
//!
//! - a symbolic link is followed (through any chain of links, dangling or not) and its target is
//!   written atomically in the target's folder; the link itself stays;
//! - a FIFO, a character device or a block device (`/dev/null`, a terminal) is opened and written
//!   directly, without a temporary file, and stays what it was;
//! - a folder, a socket or anything else is refused.
//!
//! A target that is one of the inputs (the same file, also when reached through a link) is refused,
//! so that an input is never destroyed by its own output.
//!
//! ```
//! use std::io::Write;
//! let dir = std::env::temp_dir().join(format!("eis-output-doc-{}", std::process::id()));
//! std::fs::create_dir_all(&dir).unwrap();
//! let path = dir.join("a.txt");
//! let mut f = eis_core::output::OutputFile::create(&path, &[]).unwrap();
//! f.write_all(b"new").unwrap();
//! f.commit().unwrap();
//! assert_eq!(std::fs::read_to_string(&path).unwrap(), "new");
//! # std::fs::remove_dir_all(&dir).unwrap();
//! ```

use std::fs::File;
use std::io::{self, BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

/// One CSV line, with its line end: the fields separated by commas, a field holding a comma, a quote
/// or a line end quoted (quotes doubled), as the `csv` crate writes them.
pub fn csv_line<I, T>(fields: I) -> String
where
    I: IntoIterator<Item = T>,
    T: AsRef<[u8]>,
{
    let mut w = csv::WriterBuilder::new()
        .buffer_capacity(256)
        .from_writer(Vec::new());
    // Writing into memory cannot fail; a failure would leave the line empty rather than panic.
    let bytes = w
        .write_record(fields)
        .ok()
        .and_then(|()| w.into_inner().ok())
        .unwrap_or_default();
    String::from_utf8_lossy(&bytes).into_owned()
}

/// Why an output file cannot be written.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum OutputError {
    /// The target is one of the inputs (the same file, possibly through a link).
    #[error("refusing to write {0}: it is an input file")]
    OverwritesInput(String),
    /// The target exists and is neither a regular file, a FIFO nor a device (a folder, a socket).
    #[error("refusing to write {path}: it is {what}, not a file")]
    NotAFile {
        /// The target as given.
        path: String,
        /// What it is ("a folder", "a socket").
        what: &'static str,
    },
    /// A chain of symbolic links longer than 40 links, or a loop.
    #[error("cannot write {0}: too many levels of symbolic links")]
    LinkLoop(String),
    /// The operating system refused: no permission, no space, no such folder.
    #[error("cannot write {path}: {source}")]
    Io {
        /// The target as given.
        path: String,
        /// The cause.
        source: io::Error,
    },
}

/// Longest chain of symbolic links followed (as the Linux kernel allows).
const MAX_LINKS: usize = 40;

/// Temporary files made by this process, numbered so that two writers in one process never share one.
static SERIAL: AtomicU64 = AtomicU64::new(0);

/// How the target is written.
#[derive(Debug)]
enum Mode {
    /// Through `tmp`, renamed over `target` on commit.
    Atomic { tmp: PathBuf, target: PathBuf },
    /// Straight into a FIFO or device.
    Direct,
}

/// An output file being written. Bytes go in through [`Write`]; [`OutputFile::commit`] makes them the
/// target's content. Dropped without a commit, it leaves a regular target as it was (the temporary
/// file is removed); bytes already written to a FIFO or device cannot be taken back.
#[derive(Debug)]
pub struct OutputFile {
    /// The target as given, for messages.
    path: PathBuf,
    mode: Mode,
    out: Option<BufWriter<File>>,
}

/// What the path names once symbolic links are followed.
enum Target {
    /// A regular file, or nothing yet: written atomically at this path.
    Regular(PathBuf),
    /// A FIFO or a device at this path: written directly.
    Stream(PathBuf),
}

/// Follows symbolic links from `path` to what they point at (which need not exist).
fn resolve(path: &Path) -> Result<Target, OutputError> {
    let shown = || path.display().to_string();
    let io_err = |source| OutputError::Io {
        path: shown(),
        source,
    };
    // What the system sees first: it follows every kind of link, including those of /proc that
    // name no path (`/dev/stdout` on a pipe), which the walk below could not follow.
    if let Ok(meta) = std::fs::metadata(path) {
        #[cfg(unix)]
        {
            use std::os::unix::fs::FileTypeExt;
            let ft = meta.file_type();
            if ft.is_fifo() || ft.is_char_device() || ft.is_block_device() {
                return Ok(Target::Stream(path.to_path_buf()));
            }
        }
        if meta.is_dir() {
            return Err(OutputError::NotAFile {
                path: shown(),
                what: "a folder",
            });
        }
    }
    // A regular file, a new name or a dangling link: follow the links to the path to replace.
    let mut p = path.to_path_buf();
    for _ in 0..=MAX_LINKS {
        let meta = match std::fs::symlink_metadata(&p) {
            Ok(m) => m,
            Err(e) if e.kind() == io::ErrorKind::NotFound => return Ok(Target::Regular(p)),
            Err(e) => return Err(io_err(e)),
        };
        let ft = meta.file_type();
        if ft.is_symlink() {
            let link = std::fs::read_link(&p).map_err(io_err)?;
            p = match p.parent() {
                Some(dir) if link.is_relative() => dir.join(link),
                _ => link,
            };
            continue;
        }
        if ft.is_file() {
            return Ok(Target::Regular(p));
        }
        if ft.is_dir() {
            return Err(OutputError::NotAFile {
                path: shown(),
                what: "a folder",
            });
        }
        #[cfg(unix)]
        {
            use std::os::unix::fs::FileTypeExt;
            if ft.is_fifo() || ft.is_char_device() || ft.is_block_device() {
                return Ok(Target::Stream(p));
            }
            if ft.is_socket() {
                return Err(OutputError::NotAFile {
                    path: shown(),
                    what: "a socket",
                });
            }
        }
        return Err(OutputError::NotAFile {
            path: shown(),
            what: "a special file",
        });
    }
    Err(OutputError::LinkLoop(shown()))
}

/// Whether `a` and `b` name the same existing file, links followed (device and inode on Unix, the
/// canonical path elsewhere).
pub fn same_file(a: &Path, b: &Path) -> bool {
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        match (std::fs::metadata(a), std::fs::metadata(b)) {
            (Ok(x), Ok(y)) => x.dev() == y.dev() && x.ino() == y.ino(),
            _ => false,
        }
    }
    #[cfg(not(unix))]
    {
        match (a.canonicalize(), b.canonicalize()) {
            (Ok(x), Ok(y)) => x == y,
            _ => false,
        }
    }
}

/// Whether `path` is a character device (`/dev/null`, a terminal): reading and writing one is no
/// danger to it.
fn is_char_device(path: &Path) -> bool {
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        std::fs::metadata(path).is_ok_and(|m| m.file_type().is_char_device())
    }
    #[cfg(not(unix))]
    {
        let _ = path;
        false
    }
}

impl OutputFile {
    /// Opens `path` for writing as described in the [module docs](self).
    ///
    /// # Errors
    ///
    /// [`OutputError::OverwritesInput`] when `path` is one of `inputs`; [`OutputError::NotAFile`] for a
    /// folder or socket; [`OutputError::LinkLoop`]; [`OutputError::Io`] when the temporary file (or
    /// the FIFO or device) cannot be opened.
    pub fn create(path: &Path, inputs: &[PathBuf]) -> Result<OutputFile, OutputError> {
        if !is_char_device(path) && inputs.iter().any(|i| same_file(path, i)) {
            return Err(OutputError::OverwritesInput(path.display().to_string()));
        }
        let io_err = |source| OutputError::Io {
            path: path.display().to_string(),
            source,
        };
        let (mode, file) = match resolve(path)? {
            Target::Stream(p) => {
                let f = std::fs::OpenOptions::new()
                    .write(true)
                    .open(&p)
                    .map_err(io_err)?;
                (Mode::Direct, f)
            }
            Target::Regular(target) => {
                let dir = target
                    .parent()
                    .filter(|d| !d.as_os_str().is_empty())
                    .unwrap_or(Path::new("."));
                let name = target
                    .file_name()
                    .map(|n| n.to_string_lossy().into_owned())
                    .unwrap_or_else(|| "out".into());
                let tmp = dir.join(format!(
                    ".{name}.tmp{}-{}",
                    std::process::id(),
                    SERIAL.fetch_add(1, Ordering::Relaxed)
                ));
                // A new file only: never through whatever might already sit at the temporary name.
                let f = std::fs::OpenOptions::new()
                    .write(true)
                    .create_new(true)
                    .open(&tmp)
                    .map_err(io_err)?;
                // A replaced file keeps its permissions.
                if let Ok(m) = std::fs::metadata(&target) {
                    let _ = f.set_permissions(m.permissions());
                }
                (Mode::Atomic { tmp, target }, f)
            }
        };
        Ok(OutputFile {
            path: path.to_path_buf(),
            mode,
            out: Some(BufWriter::with_capacity(1 << 16, file)),
        })
    }

    /// The target as given.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Flushes everything to disk and, for a regular target, renames the temporary file over it.
    ///
    /// # Errors
    ///
    /// [`OutputError::Io`] when a write, the flush or the rename fails; a regular target is then left
    /// as it was.
    pub fn commit(mut self) -> Result<(), OutputError> {
        let path = self.path.display().to_string();
        let Some(w) = self.out.take() else {
            return Ok(());
        };
        let file = w.into_inner().map_err(|e| OutputError::Io {
            path: path.clone(),
            source: e.into_error(),
        })?;
        let r = match &self.mode {
            Mode::Direct => Ok(()),
            Mode::Atomic { tmp, target } => file
                .sync_all()
                .and_then(|()| std::fs::rename(tmp, target))
                .inspect_err(|_| {
                    let _ = std::fs::remove_file(tmp);
                }),
        };
        r.map_err(|source| OutputError::Io { path, source })
    }
}

impl Write for OutputFile {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        match &mut self.out {
            Some(w) => w.write(buf),
            None => Err(io::Error::other("output already committed")),
        }
    }

    fn write_all(&mut self, buf: &[u8]) -> io::Result<()> {
        match &mut self.out {
            Some(w) => w.write_all(buf),
            None => Err(io::Error::other("output already committed")),
        }
    }

    fn flush(&mut self) -> io::Result<()> {
        match &mut self.out {
            Some(w) => w.flush(),
            None => Ok(()),
        }
    }
}

impl Drop for OutputFile {
    fn drop(&mut self) {
        if self.out.take().is_some() {
            if let Mode::Atomic { tmp, .. } = &self.mode {
                let _ = std::fs::remove_file(tmp);
            }
        }
    }
}

/// Writes `bytes` to `path` with an [`OutputFile`]: atomically for a regular file, directly into a
/// FIFO or device, never over one of `inputs`.
///
/// # Errors
///
/// As [`OutputFile::create`] and [`OutputFile::commit`].
pub fn write(path: &Path, bytes: &[u8], inputs: &[PathBuf]) -> Result<(), OutputError> {
    let mut f = OutputFile::create(path, inputs)?;
    f.write_all(bytes).map_err(|source| OutputError::Io {
        path: path.display().to_string(),
        source,
    })?;
    f.commit()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Fields with a comma, a quote or a line end are enclosed in quotes, quotes inside doubled; others
    /// are written as they are (Shafranovich 2005, RFC 4180 "Common Format and MIME Type for
    /// Comma-Separated Values (CSV) Files", section 2, rules 5-7).
    #[test]
    fn csv_line_quotes_only_what_rfc_4180_requires() {
        assert_eq!(csv_line(["a", "1.5", ""]), "a,1.5,\n");
        assert_eq!(
            csv_line(["x,y", "say \"hi\"", "two\nlines", "cr\r"]),
            "\"x,y\",\"say \"\"hi\"\"\",\"two\nlines\",\"cr\r\"\n"
        );
    }

    fn scratch(name: &str) -> PathBuf {
        let d = std::env::temp_dir().join(format!("eis-core-output-{name}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        std::fs::create_dir_all(&d).unwrap();
        d
    }

    /// A scratch folder `name` holding the file `file` with `text`: (folder, file path).
    fn existing(name: &str, file: &str, text: &str) -> (PathBuf, PathBuf) {
        let dir = scratch(name);
        let p = dir.join(file);
        std::fs::write(&p, text).unwrap();
        (dir, p)
    }

    /// No temporary file is left beside the target, after success or failure.
    fn no_leftovers(dir: &Path) {
        let left: Vec<_> = std::fs::read_dir(dir)
            .unwrap()
            .flatten()
            .filter(|e| e.file_name().to_string_lossy().contains(".tmp"))
            .collect();
        assert!(left.is_empty(), "{left:?}");
    }

    #[test]
    fn output_replaces_a_regular_file_and_keeps_its_permissions() {
        let (dir, p) = existing("regular", "a.csv", "old");
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            std::fs::set_permissions(&p, std::fs::Permissions::from_mode(0o640)).unwrap();
        }
        write(&p, b"new", &[]).unwrap();
        assert_eq!(std::fs::read_to_string(&p).unwrap(), "new");
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let mode = std::fs::metadata(&p).unwrap().permissions().mode();
            assert_eq!(mode & 0o777, 0o640);
        }
        no_leftovers(&dir);
    }

    #[test]
    fn output_dropped_without_commit_leaves_the_target() {
        let (dir, p) = existing("drop", "a.csv", "old");
        let mut f = OutputFile::create(&p, &[]).unwrap();
        f.write_all(b"half").unwrap();
        drop(f);
        assert_eq!(std::fs::read_to_string(&p).unwrap(), "old");
        no_leftovers(&dir);
    }

    #[test]
    fn output_refuses_inputs_and_folders() {
        let (dir, p) = existing("refuse", "in.csv", "data");
        let e = write(&p, b"x", std::slice::from_ref(&p)).unwrap_err();
        assert!(matches!(e, OutputError::OverwritesInput(_)), "{e}");
        let e = write(&dir, b"x", &[]).unwrap_err();
        assert!(e.to_string().contains("a folder"), "{e}");
        assert_eq!(std::fs::read_to_string(&p).unwrap(), "data");
    }

    #[cfg(unix)]
    #[test]
    fn output_through_a_link_writes_the_target_and_keeps_the_link() {
        let dir = scratch("link");
        std::fs::create_dir_all(dir.join("real")).unwrap();
        let target = dir.join("real/t.csv");
        std::fs::write(&target, "old").unwrap();
        let link = dir.join("l.csv");
        std::os::unix::fs::symlink("real/t.csv", &link).unwrap();
        // A link to a link, and a dangling link whose target is created.
        let link2 = dir.join("l2.csv");
        std::os::unix::fs::symlink("l.csv", &link2).unwrap();
        write(&link2, b"new", &[]).unwrap();
        assert!(
            std::fs::symlink_metadata(&link)
                .unwrap()
                .file_type()
                .is_symlink()
        );
        assert!(
            std::fs::symlink_metadata(&link2)
                .unwrap()
                .file_type()
                .is_symlink()
        );
        assert_eq!(std::fs::read_to_string(&target).unwrap(), "new");
        let dangling = dir.join("d.csv");
        std::os::unix::fs::symlink("real/new.csv", &dangling).unwrap();
        write(&dangling, b"made", &[]).unwrap();
        assert_eq!(
            std::fs::read_to_string(dir.join("real/new.csv")).unwrap(),
            "made"
        );
        // Through a link, an input is still an input.
        let e = write(&link, b"x", std::slice::from_ref(&target)).unwrap_err();
        assert!(matches!(e, OutputError::OverwritesInput(_)), "{e}");
        // A loop is an error, not a hang.
        std::os::unix::fs::symlink("loop2", dir.join("loop1")).unwrap();
        std::os::unix::fs::symlink("loop1", dir.join("loop2")).unwrap();
        let e = write(&dir.join("loop1"), b"x", &[]).unwrap_err();
        assert!(matches!(e, OutputError::LinkLoop(_)), "{e}");
        no_leftovers(&dir);
        no_leftovers(&dir.join("real"));
    }

    #[cfg(unix)]
    #[test]
    fn output_to_dev_null_leaves_the_device() {
        use std::os::unix::fs::FileTypeExt;
        write(
            Path::new("/dev/null"),
            b"gone",
            &[PathBuf::from("/dev/null")],
        )
        .unwrap();
        let m = std::fs::metadata("/dev/null").unwrap();
        assert!(m.file_type().is_char_device());
    }
}
