//! The content-addressed artifact cache. Central type: `Cache`.
//! An entry is stored under its step key as `MAGIC || blake3(payload) || payload`, written to a
//! temporary file in the cache and renamed into place, so readers never see half an entry and
//! concurrent writers of one key are harmless (same bytes). A read re-hashes the payload; a
//! damaged entry is reported and removed, never trusted. Only this module builds cache paths.

use std::fs;
use std::io::{Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

use super::key::{CACHE_FORMAT, Key};

const MAGIC: &[u8; 8] = b"CNSTART1";

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
        self.entry_path(key).is_some_and(|p| fs::read(&p).is_ok_and(|b| unwrap_entry(&b).is_ok()))
    }

    pub fn get(&self, key: &Key) -> Lookup {
        let Some(path) = self.entry_path(key) else { return Lookup::Miss };
        let mut bytes = match fs::read(&path) {
            Ok(b) => b,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Lookup::Miss,
            Err(e) => return Lookup::Damaged { path, reason: e.to_string() },
        };
        match unwrap_entry(&bytes) {
            Ok(_) => {
                // Drop the header in place: a copy would hold the payload twice.
                bytes.drain(..MAGIC.len() + 32);
                Lookup::Hit(bytes)
            }
            Err(reason) => {
                let _ = fs::remove_file(&path);
                Lookup::Damaged { path, reason }
            }
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
        fs::create_dir_all(dir)?;
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

fn unwrap_entry(bytes: &[u8]) -> Result<&[u8], String> {
    let rest = bytes.strip_prefix(MAGIC).ok_or("not a construe cache entry")?;
    if rest.len() < 32 {
        return Err("truncated".into());
    }
    let (hash, payload) = rest.split_at(32);
    if blake3::hash(payload).as_bytes() != hash {
        return Err("content does not match its hash".into());
    }
    Ok(payload)
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

    #[test]
    fn disabled_cache_keeps_nothing() {
        let cache = Cache::disabled();
        let key = Key::of_bytes(b"k");
        cache.put(&key, b"x").unwrap();
        assert!(matches!(cache.get(&key), Lookup::Miss));
    }
}
