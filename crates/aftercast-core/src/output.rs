//! Safe outputs. Every file aftercast writes goes through here:
//! - it never lands on an input: readers register the files they read ([`register_input`]) and
//!   an output naming one of them, by path or through a link (same device and inode), is
//!   refused;
//! - it is written to a new temporary file with an unpredictable name in the target's folder
//!   and renamed over the target only when that is absent or a regular file: links, devices,
//!   FIFOs and folders are refused, never written through or replaced;
//! - files get ordinary permissions (0644 less the umask), not the 0600 of a temporary file;
//! - a temporary file is removed on every exit path but a hard kill; a later write into the
//!   same folder removes stale ones left by a killed run ([`sweep_stale`]).
//!
//! Errors the user can fix (a missing folder, a folder given as a file, no permission, a name
//! too long, an output that is an input) are [`DataError`]s, so the binary exits 2.

use crate::error::DataError;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

/// Prefix of every temporary file aftercast creates.
pub const TEMP_PREFIX: &str = ".aftercast-";
/// Suffix of every temporary file aftercast creates.
pub const TEMP_SUFFIX: &str = ".tmp";

#[derive(Debug, Clone, PartialEq, Eq)]
struct Identity {
    canonical: PathBuf,
    #[cfg(unix)]
    inode: Option<(u64, u64)>,
}

static INPUTS: Mutex<Vec<Identity>> = Mutex::new(Vec::new());

fn identity(path: &Path) -> Option<Identity> {
    let canonical = std::fs::canonicalize(path).ok()?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        let inode = std::fs::metadata(path).ok().map(|m| (m.dev(), m.ino()));
        Some(Identity { canonical, inode })
    }
    #[cfg(not(unix))]
    Some(Identity { canonical })
}

/// Record that `path` is an input of this run: no output may replace it.
pub fn register_input(path: &Path) {
    if let Some(id) = identity(path)
        && let Ok(mut v) = INPUTS.lock()
        && !v.contains(&id)
    {
        v.push(id);
    }
}

/// The input `path` is (by canonical path, or by device and inode through a link), if any.
fn input_behind(path: &Path) -> Option<PathBuf> {
    let id = identity(path)?;
    let v = INPUTS.lock().ok()?;
    v.iter()
        .find(|i| {
            // the same file by another name (a hard or symbolic link), as long as the input is
            // still that file (an inode of a deleted file may be reused)
            i.canonical == id.canonical || {
                #[cfg(unix)]
                {
                    i.inode.is_some()
                        && i.inode == id.inode
                        && identity(&i.canonical).is_some_and(|now| now.inode == i.inode)
                }
                #[cfg(not(unix))]
                {
                    false
                }
            }
        })
        .map(|i| i.canonical.clone())
}

/// An error writing an output the user named, in words they can act on.
pub fn output_error(path: &Path, source: std::io::Error) -> DataError {
    DataError::Output { path: path.to_path_buf(), detail: describe(&source), source }
}

fn describe(e: &std::io::Error) -> String {
    use std::io::ErrorKind as K;
    match e.kind() {
        K::NotFound => "its folder does not exist".into(),
        K::PermissionDenied => "no permission to write there".into(),
        K::IsADirectory => "it is a folder".into(),
        K::NotADirectory => "a part of the path is a file, not a folder".into(),
        K::ReadOnlyFilesystem => "the file system is read-only".into(),
        K::StorageFull => "the disk is full".into(),
        _ if e.raw_os_error() == Some(36) => "the file name is too long".into(),
        _ => e.to_string(),
    }
}

/// Check that `path` may be written: not an input, and absent or a regular file.
///
/// # Errors
/// [`DataError::OutputIsInput`], [`DataError::OutputNotRegular`].
pub fn check_output(path: &Path) -> Result<(), DataError> {
    if let Some(input) = input_behind(path) {
        return Err(DataError::OutputIsInput { path: path.to_path_buf(), input });
    }
    if let Ok(meta) = std::fs::symlink_metadata(path) {
        let ft = meta.file_type();
        let kind = if ft.is_symlink() {
            Some("a symbolic link")
        } else if ft.is_dir() {
            Some("a folder")
        } else if !ft.is_file() {
            Some("a device, FIFO or socket")
        } else {
            None
        };
        if let Some(kind) = kind {
            return Err(DataError::OutputNotRegular { path: path.to_path_buf(), kind });
        }
    }
    Ok(())
}

fn folder_of(path: &Path) -> PathBuf {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// A file being written: a temporary file in the target's folder, renamed over the target by
/// [`AtomicFile::commit`]; dropped without commit, it is removed.
#[derive(Debug)]
pub struct AtomicFile {
    target: PathBuf,
    tmp: tempfile::NamedTempFile,
}

impl AtomicFile {
    /// Start writing `path` (checked with [`check_output`]; its folder must exist).
    ///
    /// # Errors
    /// [`DataError`] naming `path`.
    pub fn create(path: &Path) -> Result<AtomicFile, DataError> {
        check_output(path)?;
        let dir = folder_of(path);
        let mut builder = tempfile::Builder::new();
        builder.prefix(TEMP_PREFIX).suffix(TEMP_SUFFIX);
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            // open(2) applies the umask to this mode, as for any file a program creates
            builder.permissions(std::fs::Permissions::from_mode(0o666));
        }
        let tmp = builder.tempfile_in(&dir).map_err(|e| output_error(path, e))?;
        Ok(AtomicFile { target: path.to_path_buf(), tmp })
    }

    /// The file to write into.
    pub fn file(&mut self) -> &mut std::fs::File {
        self.tmp.as_file_mut()
    }

    /// Flush to disk and rename over the target (checked again: nothing may have replaced it
    /// by a link meanwhile).
    ///
    /// # Errors
    /// [`DataError`] naming the target.
    pub fn commit(self) -> Result<(), DataError> {
        check_output(&self.target)?;
        self.tmp.as_file().sync_all().map_err(|e| output_error(&self.target, e))?;
        let target = self.target.clone();
        self.tmp.persist(&target).map_err(|e| output_error(&target, e.error))?;
        Ok(())
    }
}

impl Write for AtomicFile {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        self.tmp.write(buf)
    }
    fn flush(&mut self) -> std::io::Result<()> {
        self.tmp.flush()
    }
}

/// Write `bytes` to `path` atomically (see the module docs), creating its folder.
///
/// # Errors
/// [`DataError`] naming `path`.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), DataError> {
    create_folder(&folder_of(path))?;
    let mut f = AtomicFile::create(path)?;
    f.file().write_all(bytes).map_err(|e| output_error(path, e))?;
    f.commit()
}

/// Create a folder (and its parents) for outputs.
///
/// # Errors
/// [`DataError::Output`] naming it.
pub fn create_folder(dir: &Path) -> Result<(), DataError> {
    if let Some(input) = input_behind(dir) {
        return Err(DataError::OutputIsInput { path: dir.to_path_buf(), input });
    }
    std::fs::create_dir_all(dir).map_err(|e| output_error(dir, e))
}

/// Remove temporary files aftercast left in `dir` (a killed run). Only names with the
/// temporary prefix and suffix are touched.
pub fn sweep_stale(dir: &Path) {
    let Ok(entries) = std::fs::read_dir(dir) else { return };
    for e in entries.flatten() {
        let name = e.file_name();
        let name = name.to_string_lossy();
        if name.starts_with(TEMP_PREFIX) && name.ends_with(TEMP_SUFFIX) && e.file_type().is_ok_and(|t| t.is_file()) {
            let _ = std::fs::remove_file(e.path());
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_output_never_lands_on_an_input_or_through_a_link() {
        let dir = tempfile::tempdir().expect("tempdir");
        let input = dir.path().join("in.csv");
        std::fs::write(&input, b"a,b\n1,2\n").expect("write");
        register_input(&input);
        let err = write_atomic(&input, b"x").expect_err("refused");
        assert!(matches!(err, DataError::OutputIsInput { .. }), "{err}");
        #[cfg(unix)]
        {
            let link = dir.path().join("link.json");
            std::os::unix::fs::symlink(&input, &link).expect("symlink");
            let err = write_atomic(&link, b"x").expect_err("refused");
            assert!(matches!(err, DataError::OutputIsInput { .. }), "{err}");
            let other = dir.path().join("other.json");
            std::os::unix::fs::symlink(dir.path().join("nowhere"), &other).expect("symlink");
            let err = write_atomic(&other, b"x").expect_err("refused");
            assert!(matches!(err, DataError::OutputNotRegular { .. }), "{err}");
        }
        assert_eq!(std::fs::read(&input).expect("read"), b"a,b\n1,2\n");
    }

    #[test]
    fn written_files_are_ordinary_and_no_temporary_stays() {
        let dir = tempfile::tempdir().expect("tempdir");
        let p = dir.path().join("sub").join("r.json");
        write_atomic(&p, b"first").expect("write");
        write_atomic(&p, b"second").expect("write");
        assert_eq!(std::fs::read(&p).expect("read"), b"second");
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let mode = std::fs::metadata(&p).expect("meta").permissions().mode() & 0o777;
            assert!(mode & 0o044 != 0 || mode == 0o600, "group/other can read under a usual umask: {mode:o}");
        }
        assert_eq!(std::fs::read_dir(p.parent().expect("dir")).expect("dir").count(), 1);
        let err = write_atomic(dir.path(), b"x").expect_err("a folder is not a file");
        assert!(matches!(err, DataError::OutputNotRegular { .. }), "{err}");
        let err = write_atomic(&dir.path().join("f").join("g").join("x".repeat(300)), b"x").expect_err("too long");
        assert!(err.to_string().contains("too long"), "{err}");
    }

    #[test]
    fn stale_temporaries_are_swept() {
        let dir = tempfile::tempdir().expect("tempdir");
        std::fs::write(dir.path().join(".aftercast-abc.tmp"), b"x").expect("write");
        std::fs::write(dir.path().join("keep.tmp"), b"x").expect("write");
        sweep_stale(dir.path());
        let names: Vec<String> = std::fs::read_dir(dir.path())
            .expect("dir")
            .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
            .collect();
        assert_eq!(names, vec!["keep.tmp".to_string()]);
    }
}
