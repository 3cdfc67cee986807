//! The content-addressed artifact cache. Central type: `Cache`.
//! An entry is stored under its step key as `MAGIC || blake3(payload) || payload`, written to a
//! temporary file in the cache and renamed into place, so readers never see half an entry and
//! concurrent writers of one key are harmless (same bytes). A read re-hashes the payload; a
//! damaged entry is reported and removed, never trusted. Only this module builds cache paths.
//! Whatever sits at an entry's path (a FIFO, a device, a folder, a file where the `xx/` folder
//! should be) is opened without blocking, read with a size bound, and cleared away so the
//! entry can be recomputed: a damaged cache costs time, never a run.

use std::fs;
use std::io::{Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

use super::key::{CACHE_FORMAT, Key};

const MAGIC: &[u8; 8] = b"CNSTART1";

/// Bytes before the payload: the magic and the payload's BLAKE3 hash.
const HEADER: u64 = MAGIC.len() as u64 + 32;

/// Largest entry read back (64 GiB). The biggest artifact is the loaded table, 8 bytes per
/// answer: this allows billions of answers, yet keeps a runaway file from being read whole.
const MAX_ENTRY_BYTES: u64 = 1 << 36;

/// What reading an entry found, before anything is removed.
enum Entry {
    Sound(Vec<u8>),
    Missing,
    Damaged(String),
}

/// What a cache lookup found.
#[derive(Debug)]
pub enum Lookup {
    Hit(Vec<u8>),
    Miss,
    /// An entry existed but failed its check; it has been removed.
    Damaged {
        path: PathBuf,
        reason: String,
    },
}

#[derive(Debug, Clone)]
pub struct Cache {
    /// `None` when caching is off (`--no-cache`, `verify`): every lookup misses, nothing is kept.
    root: Option<PathBuf>,
}

impl Cache {
    pub fn at(root: impl Into<PathBuf>) -> Cache {
        Cache { root: Some(root.into()) }
    }

    pub fn disabled() -> Cache {
        Cache { root: None }
    }

    pub fn root(&self) -> Option<&Path> {
        self.root.as_deref()
    }

    fn entry_path(&self, key: &Key) -> Option<PathBuf> {
        let hex = key.hex();
        self.root.as_ref().map(|r| r.join(format!("v{CACHE_FORMAT}")).join(&hex[..2]).join(hex))
    }

    /// Whether a sound entry exists (checks the hash, so `plan` never calls a damaged one cached).
    pub fn contains(&self, key: &Key) -> bool {
        self.entry_path(key).is_some_and(|p| matches!(read_entry(&p), Entry::Sound(_)))
    }

    /// The payload stored under `key`. Anything unsound at the entry's path is removed (a
    /// folder with its contents; a FIFO, device node or symbolic link as the link itself) so
    /// the recomputed entry can take its place.
    pub fn get(&self, key: &Key) -> Lookup {
        let Some(path) = self.entry_path(key) else { return Lookup::Miss };
        match read_entry(&path) {
            Entry::Sound(payload) => Lookup::Hit(payload),
            Entry::Missing => Lookup::Miss,
            Entry::Damaged(reason) => {
                let reason = match self.clear(&path) {
                    Ok(()) => reason,
                    Err(e) => format!("{reason}; could not remove it: {e}"),
                };
                Lookup::Damaged { path, reason }
            }
        }
    }

    /// Removes whatever occupies `path` or stands where one of its folders below the cache
    /// root should be. The cache root itself is the user's and is never removed.
    fn clear(&self, path: &Path) -> std::io::Result<()> {
        let Some(root) = &self.root else { return Ok(()) };
        // Folders between the root and the entry (`v<format>/`, `xx/`), outermost first.
        let mut folders: Vec<&Path> = path.ancestors().skip(1).take_while(|p| *p != root.as_path()).collect();
        folders.reverse();
        for folder in folders {
            match fs::metadata(folder) {
                Ok(m) if m.is_dir() => {}
                Ok(_) => return fs::remove_file(folder),
                // A dangling link (or a file we cannot stat) in place of the folder.
                Err(e) if e.kind() != std::io::ErrorKind::NotFound => return fs::remove_file(folder),
                Err(_) if fs::symlink_metadata(folder).is_ok() => return fs::remove_file(folder),
                Err(_) => return Ok(()),
            }
        }
        match fs::symlink_metadata(path) {
            Ok(m) if m.is_dir() => fs::remove_dir_all(path),
            Ok(_) => fs::remove_file(path),
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(()),
            Err(e) => Err(e),
        }
    }

    /// Stores `payload` under `key` atomically (temporary file, fsync, rename).
    pub fn put(&self, key: &Key, payload: &[u8]) -> std::io::Result<()> {
        self.put_with(key, |w| w.write_all(payload)).map(|_| ())
    }

    /// Streams a payload into the entry for `key` as `write` produces it, so a large artifact
    /// (the loaded table) is never held twice in memory; returns the payload's BLAKE3 hash.
    /// Same atomicity as `put`: the hash slot is filled in before the rename. With caching off
    /// the payload is only hashed.
    pub fn put_with(
        &self,
        key: &Key,
        write: impl FnOnce(&mut dyn Write) -> std::io::Result<()>,
    ) -> std::io::Result<Key> {
        let Some(path) = self.entry_path(key) else {
            let mut sink = Hashing::new(std::io::sink());
            write(&mut sink)?;
            return Ok(sink.finish());
        };
        let dir = path.parent().unwrap_or(Path::new("."));
        // A file where a folder should be, or a folder where the entry goes, would make every
        // run fail here: clear it first (best effort; the create or rename reports what is left).
        if fs::create_dir_all(dir).is_err() {
            let _ = self.clear(&path);
            fs::create_dir_all(dir)?;
        }
        if fs::symlink_metadata(&path).is_ok_and(|m| m.is_dir()) {
            let _ = self.clear(&path);
        }
        let mut tmp = tempfile::Builder::new().prefix(".partial-").tempfile_in(dir)?;
        tmp.write_all(MAGIC)?;
        tmp.write_all(&[0; 32])?;
        let mut body = Hashing::new(std::io::BufWriter::with_capacity(1 << 20, tmp.as_file_mut()));
        write(&mut body)?;
        body.inner.flush()?;
        let hash = body.finish();
        drop(body);
        tmp.as_file_mut().seek(SeekFrom::Start(MAGIC.len() as u64))?;
        tmp.write_all(&hash.0)?;
        tmp.as_file().sync_all()?;
        tmp.persist(&path).map_err(|e| e.error)?;
        Ok(hash)
    }
}

/// A writer that hashes what passes through it.
struct Hashing<W: Write> {
    inner: W,
    hasher: blake3::Hasher,
}

impl<W: Write> Hashing<W> {
    fn new(inner: W) -> Hashing<W> {
        Hashing { inner, hasher: blake3::Hasher::new() }
    }

    fn finish(&self) -> Key {
        Key(*self.hasher.finalize().as_bytes())
    }
}

impl<W: Write> Write for Hashing<W> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        let n = self.inner.write(buf)?;
        self.hasher.update(&buf[..n]);
        Ok(n)
    }

    fn flush(&mut self) -> std::io::Result<()> {
        self.inner.flush()
    }
}

/// Reads and checks the entry at `path` without blocking (a FIFO or device is refused before a
/// byte is read), rejecting foreign files after their first bytes and reading at most
/// `MAX_ENTRY_BYTES`.
fn read_entry(path: &Path) -> Entry {
    let mut file = match crate::fsguard::open_regular(path) {
        Ok(f) => f,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Entry::Missing,
        Err(e) if e.kind() == std::io::ErrorKind::NotADirectory => {
            return Entry::Damaged("a file stands where its folder should be".into());
        }
        Err(e) => return Entry::Damaged(e.to_string()),
    };
    let len = match file.metadata() {
        Ok(m) => m.len(),
        Err(e) => return Entry::Damaged(e.to_string()),
    };
    if len > MAX_ENTRY_BYTES {
        return Entry::Damaged(format!("{len} bytes, more than the {MAX_ENTRY_BYTES} bytes of the largest entry read"));
    }
    let mut header = [0u8; HEADER as usize];
    if let Err(e) = file.read_exact(&mut header) {
        return Entry::Damaged(match e.kind() {
            std::io::ErrorKind::UnexpectedEof => "truncated".into(),
            _ => e.to_string(),
        });
    }
    let Some(hash) = header.strip_prefix(MAGIC) else {
        return Entry::Damaged("not a construe cache entry".into());
    };
    let expected = len - HEADER;
    let mut payload = Vec::with_capacity(expected as usize);
    // `take` bounds the read even if the file grows while it is read.
    if let Err(e) = file.take(expected + 1).read_to_end(&mut payload) {
        return Entry::Damaged(e.to_string());
    }
    if payload.len() as u64 != expected {
        return Entry::Damaged("its size changed while it was read".into());
    }
    if blake3::hash(&payload).as_bytes() != hash {
        return Entry::Damaged("content does not match its hash".into());
    }
    Entry::Sound(payload)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn put_get_and_damage_detection() {
        let dir = tempfile::tempdir().unwrap();
        let cache = Cache::at(dir.path());
        let key = Key::of_bytes(b"step");
        assert!(matches!(cache.get(&key), Lookup::Miss));
        cache.put(&key, b"payload").unwrap();
        assert!(matches!(cache.get(&key), Lookup::Hit(ref b) if b == b"payload"));
        let path = cache.entry_path(&key).unwrap();
        let mut bytes = fs::read(&path).unwrap();
        *bytes.last_mut().unwrap() ^= 1;
        fs::write(&path, bytes).unwrap();
        assert!(!cache.contains(&key));
        assert!(matches!(cache.get(&key), Lookup::Damaged { .. }));
        assert!(matches!(cache.get(&key), Lookup::Miss), "a damaged entry is removed");
    }

    /// A cache entry replaced by `make` is reported, removed and replaced by the next put.
    fn recovers_from(make: impl FnOnce(&Path)) {
        let dir = tempfile::tempdir().unwrap();
        let cache = Cache::at(dir.path());
        let key = Key::of_bytes(b"step");
        cache.put(&key, b"payload").unwrap();
        let path = cache.entry_path(&key).unwrap();
        fs::remove_file(&path).unwrap();
        make(&path);
        assert!(!cache.contains(&key));
        match cache.get(&key) {
            Lookup::Damaged { reason, .. } => assert!(!reason.contains("could not remove"), "{reason}"),
            other => panic!("expected a damaged entry, got {other:?}"),
        }
        assert!(fs::symlink_metadata(&path).is_err(), "the damaged entry is removed");
        cache.put(&key, b"payload").unwrap();
        assert!(matches!(cache.get(&key), Lookup::Hit(ref b) if b == b"payload"));
    }

    #[test]
    fn a_folder_in_place_of_an_entry_is_removed() {
        recovers_from(|p| {
            fs::create_dir_all(p.join("inner")).unwrap();
            fs::write(p.join("inner/x"), b"x").unwrap();
        });
    }

    #[test]
    fn garbage_and_truncated_entries_are_removed() {
        recovers_from(|p| fs::write(p, vec![b'z'; 100_000]).unwrap());
        recovers_from(|p| fs::write(p, b"CNSTART1abc").unwrap());
    }

    #[test]
    fn a_file_in_place_of_a_folder_is_removed() {
        // The `xx/` folder, then the `v<format>/` folder, replaced by a file.
        for up in 1..=2 {
            let dir = tempfile::tempdir().unwrap();
            let cache = Cache::at(dir.path());
            let key = Key::of_bytes(b"step");
            let folder = cache.entry_path(&key).unwrap().ancestors().nth(up).unwrap().to_path_buf();
            fs::create_dir_all(folder.parent().unwrap()).unwrap();
            fs::write(&folder, b"not a folder").unwrap();
            assert!(matches!(cache.get(&key), Lookup::Damaged { .. }));
            cache.put(&key, b"payload").unwrap();
            assert!(matches!(cache.get(&key), Lookup::Hit(_)));
            // Also without a get first, as when a run finds nothing to read.
            fs::remove_dir_all(&folder).unwrap();
            fs::write(&folder, b"not a folder").unwrap();
            cache.put(&key, b"payload").unwrap();
            assert!(matches!(cache.get(&key), Lookup::Hit(_)));
        }
    }

    #[test]
    fn put_replaces_a_folder_without_a_get() {
        let dir = tempfile::tempdir().unwrap();
        let cache = Cache::at(dir.path());
        let key = Key::of_bytes(b"step");
        fs::create_dir_all(cache.entry_path(&key).unwrap().join("x")).unwrap();
        cache.put(&key, b"payload").unwrap();
        assert!(matches!(cache.get(&key), Lookup::Hit(_)));
    }

    #[cfg(unix)]
    #[test]
    fn special_files_are_refused_without_blocking_and_removed() {
        recovers_from(|p| {
            assert!(std::process::Command::new("mkfifo").arg(p).status().unwrap().success());
        });
        recovers_from(|p| std::os::unix::fs::symlink("/dev/zero", p).unwrap());
        // The link was removed, not its target.
        assert!(Path::new("/dev/zero").exists());
    }

    #[test]
    fn disabled_cache_keeps_nothing() {
        let cache = Cache::disabled();
        let key = Key::of_bytes(b"k");
        cache.put(&key, b"x").unwrap();
        assert!(matches!(cache.get(&key), Lookup::Miss));
    }
}
