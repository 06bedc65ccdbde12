//! Snapshot files in the `[record] dir` folder.
//!
//! - A snapshot is written as `snapshot-<feed time>.bin`, the feed time of
//!   the last record handled in ISO 8601 basic form with nanoseconds
//!   (`snapshot-20260514T060002.125000000Z.bin`), atomically: into a
//!   temporary file in the same folder, which is synced, renamed over the
//!   final name, and the folder synced, so that a crash leaves either the
//!   old set of files or the new one, never a partial snapshot under a
//!   final name.
//! - After each write only the newest `snapshot_keep` are kept, and
//!   temporary files left by a crash are removed.
//! - Newest means written last: files are ordered by the daemon clock in
//!   their header, then by name. (A run that started cold after a
//!   configuration change writes snapshots with earlier feed times than
//!   the refused ones; they are still the newest.) Files whose header
//!   cannot be read count as the oldest.

use super::{Header, HEADER_LEN, SnapshotError};
use crate::time::Timestamp;
use std::io::{Read, Write};
use std::path::{Path, PathBuf};

const PREFIX: &str = "snapshot-";
const SUFFIX: &str = ".bin";
const TEMP_PREFIX: &str = ".snapshot-";
const TEMP_SUFFIX: &str = ".tmp";

#[derive(Debug, thiserror::Error)]
#[error("{path}: {source}")]
pub struct FileError {
    pub path: String,
    pub source: std::io::Error,
}

fn err(path: &Path) -> impl FnOnce(std::io::Error) -> FileError + '_ {
    move |source| FileError { path: path.display().to_string(), source }
}

/// One snapshot file found in the folder, with its header if readable.
#[derive(Debug, Clone)]
pub struct SnapshotFile {
    pub path: PathBuf,
    pub header: Result<Header, SnapshotError>,
}

impl SnapshotFile {
    /// Reads the whole file.
    pub fn read(&self) -> Result<Vec<u8>, FileError> {
        std::fs::read(&self.path).map_err(err(&self.path))
    }
}

/// The snapshot files of one folder.
#[derive(Debug, Clone)]
pub struct SnapshotDir {
    dir: PathBuf,
    keep: usize,
}

/// The file name of a snapshot whose last record has feed time `t`.
pub fn file_name(t: Timestamp) -> String {
    let mut s = String::with_capacity(40);
    t.write_rfc3339(&mut s);
    // "2026-05-14T06:00:02[.fff]Z" → "20260514T060002" + 9-digit fraction.
    let whole: String = s.chars().take(19).filter(|c| *c != '-' && *c != ':').collect();
    let nanos = t.unix_nanos().rem_euclid(1_000_000_000);
    format!("{PREFIX}{whole}.{nanos:09}Z{SUFFIX}")
}

impl SnapshotDir {
    pub fn new(dir: impl Into<PathBuf>, keep: usize) -> SnapshotDir {
        SnapshotDir { dir: dir.into(), keep: keep.max(1) }
    }

    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// Writes `bytes` as the snapshot of feed time `feed_time`, then keeps
    /// the newest. Returns the file's path.
    pub fn write(&self, bytes: &[u8], feed_time: Timestamp) -> Result<PathBuf, FileError> {
        std::fs::create_dir_all(&self.dir).map_err(err(&self.dir))?;
        let name = file_name(feed_time);
        let path = self.dir.join(&name);
        let temp = self.dir.join(format!(".{name}{TEMP_SUFFIX}"));
        let written = (|| {
            let mut f = std::fs::File::create(&temp)?;
            f.write_all(bytes)?;
            f.sync_all()
        })();
        if let Err(e) = written {
            let _ = std::fs::remove_file(&temp);
            return Err(FileError { path: temp.display().to_string(), source: e });
        }
        std::fs::rename(&temp, &path).map_err(err(&path))?;
        sync_dir(&self.dir).map_err(err(&self.dir))?;
        self.prune()?;
        Ok(path)
    }

    /// The snapshot files, newest first (see the module docs).
    pub fn list(&self) -> Result<Vec<SnapshotFile>, FileError> {
        let rd = match std::fs::read_dir(&self.dir) {
            Ok(rd) => rd,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(Vec::new()),
            Err(e) => return Err(FileError { path: self.dir.display().to_string(), source: e }),
        };
        let mut files = Vec::new();
        for entry in rd {
            let entry = entry.map_err(err(&self.dir))?;
            let name = entry.file_name();
            let Some(name) = name.to_str() else { continue };
            if !(name.starts_with(PREFIX) && name.ends_with(SUFFIX)) {
                continue;
            }
            let path = entry.path();
            let header = read_header(&path);
            files.push(SnapshotFile { path, header });
        }
        files.sort_by(|a, b| {
            let w = |f: &SnapshotFile| f.header.as_ref().ok().map(|h| h.written_at.unwrap_or_default());
            w(b).cmp(&w(a)).then_with(|| b.path.cmp(&a.path))
        });
        Ok(files)
    }

    /// Removes all but the newest `keep` snapshots and any temporary file
    /// a crash left. Returns the files removed.
    pub fn prune(&self) -> Result<Vec<PathBuf>, FileError> {
        let mut removed = Vec::new();
        for f in self.list()?.into_iter().skip(self.keep) {
            std::fs::remove_file(&f.path).map_err(err(&f.path))?;
            removed.push(f.path);
        }
        // Only one writer uses the folder (the engine task, one write at a
        // time), so a temporary file seen here is a crash's leftover.
        if let Ok(rd) = std::fs::read_dir(&self.dir) {
            for entry in rd.flatten() {
                let name = entry.file_name();
                if name.to_str().is_some_and(|n| n.starts_with(TEMP_PREFIX) && n.ends_with(TEMP_SUFFIX)) {
                    let p = entry.path();
                    if std::fs::remove_file(&p).is_ok() {
                        removed.push(p);
                    }
                }
            }
        }
        Ok(removed)
    }
}

fn read_header(path: &Path) -> Result<Header, SnapshotError> {
    let mut buf = Vec::with_capacity(HEADER_LEN);
    match std::fs::File::open(path).and_then(|f| f.take(HEADER_LEN as u64).read_to_end(&mut buf)) {
        Ok(_) => Header::read(&buf),
        Err(_) => Err(SnapshotError::Truncated { got: 0, need: HEADER_LEN }),
    }
}

/// Makes a rename in `dir` durable.
fn sync_dir(dir: &Path) -> std::io::Result<()> {
    #[cfg(unix)]
    {
        std::fs::File::open(dir)?.sync_all()
    }
    #[cfg(not(unix))]
    {
        let _ = dir;
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::Config;
    use crate::snapshot::Pipeline;
    use std::collections::HashMap;

    fn t(s: &str) -> Timestamp {
        Timestamp::parse_rfc3339(s).unwrap()
    }

    #[test]
    fn names_sort_as_times() {
        assert_eq!(file_name(t("2026-05-14T06:00:02.125Z")), "snapshot-20260514T060002.125000000Z.bin");
        assert_eq!(file_name(t("2026-05-14T06:00:02Z")), "snapshot-20260514T060002.000000000Z.bin");
        assert!(file_name(t("2026-05-14T06:00:02Z")) < file_name(t("2026-05-14T06:00:02.5Z")));
        assert!(file_name(t("2026-05-14T06:00:02.5Z")) < file_name(t("2026-05-14T06:00:03Z")));
    }

    #[test]
    fn keeps_the_newest_and_skips_damaged() {
        let cfg = Config::load(None, &HashMap::new()).unwrap();
        let tmp = tempfile::tempdir().unwrap();
        let d = SnapshotDir::new(tmp.path(), 3);
        let p = Pipeline::new(&cfg).unwrap();
        // A crash's leftover temporary file goes at the next write.
        std::fs::write(tmp.path().join(".snapshot-x.bin.tmp"), b"partial").unwrap();
        let mut paths = Vec::new();
        for k in 0..5 {
            let wall = t("2030-01-01T00:00:00Z").plus_secs(k as f64 * 60.0);
            // Feed times go down: the newest is the one written last.
            let feed = t("2026-05-14T07:00:00Z").plus_secs(-(k as f64));
            paths.push(d.write(&p.snapshot_at(wall), feed).unwrap());
        }
        let list = d.list().unwrap();
        let names: Vec<_> = list.iter().map(|f| f.path.clone()).collect();
        assert_eq!(names, vec![paths[4].clone(), paths[3].clone(), paths[2].clone()]);
        let left: Vec<_> = std::fs::read_dir(tmp.path()).unwrap().map(|e| e.unwrap().file_name()).collect();
        assert_eq!(left.len(), 3, "{left:?}");
        // The newest damaged: its body no longer matches the checksum.
        let mut bytes = std::fs::read(&paths[4]).unwrap();
        let last = bytes.len() - 1;
        bytes[last] ^= 0x40;
        std::fs::write(&paths[4], &bytes).unwrap();
        let list = d.list().unwrap();
        assert_eq!(list[0].path, paths[4], "the header is still readable, so it still sorts first");
        assert_eq!(Pipeline::restore(&cfg, &list[0].read().unwrap()).err(), Some(SnapshotError::Checksum));
        assert!(Pipeline::restore(&cfg, &list[1].read().unwrap()).is_ok());
    }
}
