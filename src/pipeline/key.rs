//! Content keys: BLAKE3 over a canonical JSON description of what a step computes.
//! Central type: `Key`. Canonical JSON sorts object keys and prints numbers by serde_json's
//! shortest round-trip form, so reordering keys or editing comments in a spec changes no key.

use std::fmt;
use std::io::Read;
use std::path::Path;

use serde::{Deserialize, Serialize};
use serde_json::Value;

/// Bumped whenever the cache's entry layout or key recipe changes (old entries then miss).
pub const CACHE_FORMAT: u32 = 2;

/// A 32-byte BLAKE3 digest, shown as 64 hex digits.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Key(pub [u8; 32]);

impl Key {
    pub fn of_bytes(bytes: &[u8]) -> Key {
        Key(*blake3::hash(bytes).as_bytes())
    }

    /// The key of a JSON value in canonical form.
    pub fn of_json(value: &Value) -> Key {
        Key::of_bytes(canonical_json(value).as_bytes())
    }

    pub fn hex(&self) -> String {
        self.0.iter().map(|b| format!("{b:02x}")).collect()
    }

    /// The first 12 hex digits, enough to tell steps apart in a listing.
    pub fn short(&self) -> String {
        self.hex()[..12].to_string()
    }

    pub fn parse(hex: &str) -> Option<Key> {
        if hex.len() != 64 {
            return None;
        }
        let mut out = [0u8; 32];
        for (i, chunk) in hex.as_bytes().chunks(2).enumerate() {
            out[i] = u8::from_str_radix(std::str::from_utf8(chunk).ok()?, 16).ok()?;
        }
        Some(Key(out))
    }
}

impl fmt::Display for Key {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.hex())
    }
}

impl Serialize for Key {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(&self.hex())
    }
}

impl<'de> Deserialize<'de> for Key {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let s = String::deserialize(d)?;
        Key::parse(&s).ok_or_else(|| serde::de::Error::custom("expected 64 hex digits"))
    }
}

/// The BLAKE3 hash and size of a file, streamed so large waves are not held in memory twice.
/// Only regular files: a FIFO would block the open and a device (`/dev/zero`) never ends.
pub fn hash_file(path: &Path) -> std::io::Result<(Key, u64)> {
    let mut file = crate::fsguard::open_regular(path)?;
    let mut hasher = blake3::Hasher::new();
    let mut buf = vec![0u8; 1 << 16];
    let mut size = 0u64;
    loop {
        let n = file.read(&mut buf)?;
        if n == 0 {
            break;
        }
        size += n as u64;
        hasher.update(&buf[..n]);
    }
    Ok((Key(*hasher.finalize().as_bytes()), size))
}

/// JSON with object keys sorted at every level and no whitespace.
pub fn canonical_json(value: &Value) -> String {
    let mut out = String::new();
    write_canonical(value, &mut out);
    out
}

fn write_canonical(value: &Value, out: &mut String) {
    match value {
        Value::Object(map) => {
            let mut entries: Vec<(&String, &Value)> = map.iter().collect();
            entries.sort_by(|a, b| a.0.cmp(b.0));
            out.push('{');
            for (i, (k, v)) in entries.into_iter().enumerate() {
                if i > 0 {
                    out.push(',');
                }
                out.push_str(&Value::String(k.clone()).to_string());
                out.push(':');
                write_canonical(v, out);
            }
            out.push('}');
        }
        Value::Array(items) => {
            out.push('[');
            for (i, v) in items.iter().enumerate() {
                if i > 0 {
                    out.push(',');
                }
                write_canonical(v, out);
            }
            out.push(']');
        }
        other => out.push_str(&other.to_string()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    #[test]
    fn key_order_does_not_matter() {
        let a = json!({"b": 1, "a": {"y": [1, 2], "x": 0.01}});
        let b = json!({"a": {"x": 0.01, "y": [1, 2]}, "b": 1});
        assert_eq!(Key::of_json(&a), Key::of_json(&b));
        assert_eq!(canonical_json(&a), r#"{"a":{"x":0.01,"y":[1,2]},"b":1}"#);
    }

    // BLAKE3 of the empty input, from the BLAKE3 specification's test vectors.
    #[test]
    fn blake3_reference_vector() {
        assert_eq!(Key::of_bytes(b"").hex(), "af1349b9f5f9a1a6a0404dea36dcc9499bcb25c9adc112b7cc9a93cae41f3262");
    }

    #[cfg(unix)]
    #[test]
    fn hash_file_refuses_special_files() {
        let e = hash_file(Path::new("/dev/zero")).unwrap_err();
        assert!(crate::fsguard::refusal(&e).is_some(), "{e}");
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("w.csv");
        std::fs::write(&p, b"abc").unwrap();
        assert_eq!(hash_file(&p).unwrap(), (Key::of_bytes(b"abc"), 3));
    }

    #[test]
    fn hex_round_trip() {
        let k = Key::of_bytes(b"x");
        assert_eq!(Key::parse(&k.hex()), Some(k));
    }
}
