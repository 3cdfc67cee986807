//! Opening files the user names without ever blocking or reading without end. Central
//! functions: `open_regular` and `read_regular`. A FIFO, socket or device (`/dev/zero`) named as
//! a spec, data file, model, manifest or cache entry is refused before a byte is read: opening
//! a FIFO for reading blocks until a writer appears, and a device can stream forever. Every
//! read of a user-named file goes through here, with an upper bound on its size.

use std::fs::{File, OpenOptions};
use std::io::Read;
use std::path::Path;

/// Upper bound for text files construe reads whole (specs, simulation models, manifests,
/// results): far above any real one, far below a memory problem.
pub const MAX_TEXT_BYTES: u64 = 64 << 20;

/// What kind of file a path names, in words for a diagnostic.
fn kind_name(meta: &std::fs::Metadata) -> &'static str {
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        let t = meta.file_type();
        if t.is_fifo() {
            return "a named pipe (FIFO)";
        }
        if t.is_socket() {
            return "a socket";
        }
        if t.is_char_device() || t.is_block_device() {
            return "a device";
        }
    }
    if meta.is_dir() { "a folder" } else { "not a regular file" }
}

/// Opens `path` for reading only if it is a regular file (symbolic links are followed). The
/// open itself cannot block: on Unix it uses `O_NONBLOCK`, which a regular file ignores and
/// which keeps a FIFO without a writer from hanging the open.
pub fn open_regular(path: &Path) -> std::io::Result<File> {
    let mut options = OpenOptions::new();
    options.read(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        options.custom_flags(libc::O_NONBLOCK);
    }
    let file = options.open(path)?;
    let meta = file.metadata()?;
    if !meta.is_file() {
        return Err(std::io::Error::new(
            std::io::ErrorKind::InvalidInput,
            format!("it is {}; construe reads only regular files", kind_name(&meta)),
        ));
    }
    Ok(file)
}

/// Reads a whole regular file of at most `max_bytes` bytes.
pub fn read_regular(path: &Path, max_bytes: u64) -> std::io::Result<Vec<u8>> {
    let file = open_regular(path)?;
    let len = file.metadata()?.len();
    if len > max_bytes {
        return Err(too_large(len, max_bytes));
    }
    let mut bytes = Vec::with_capacity(len as usize);
    // `take` bounds the read even if the file grows while it is read.
    file.take(max_bytes + 1).read_to_end(&mut bytes)?;
    if bytes.len() as u64 > max_bytes {
        return Err(too_large(bytes.len() as u64, max_bytes));
    }
    Ok(bytes)
}

/// Reads a whole regular UTF-8 text file of at most `max_bytes` bytes.
pub fn read_regular_text(path: &Path, max_bytes: u64) -> std::io::Result<String> {
    let bytes = read_regular(path, max_bytes)?;
    String::from_utf8(bytes).map_err(|e| {
        let at = e.utf8_error().valid_up_to();
        std::io::Error::new(
            std::io::ErrorKind::InvalidData,
            format!("it is not UTF-8 text (invalid byte at offset {at})"),
        )
    })
}

fn too_large(len: u64, max: u64) -> std::io::Error {
    std::io::Error::new(
        std::io::ErrorKind::InvalidInput,
        format!("it is {len} bytes, more than the {max} bytes construe reads from such a file"),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn regular_files_read_and_bounded() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("a.txt");
        std::fs::write(&p, "hello").unwrap();
        assert_eq!(read_regular_text(&p, 10).unwrap(), "hello");
        let e = read_regular(&p, 4).unwrap_err();
        assert!(e.to_string().contains("5 bytes, more than the 4"), "{e}");
        let e = open_regular(dir.path()).unwrap_err();
        assert!(e.to_string().contains("a folder"), "{e}");
    }

    #[cfg(unix)]
    #[test]
    fn special_files_are_refused_without_blocking() {
        let e = open_regular(Path::new("/dev/zero")).unwrap_err();
        assert!(e.to_string().contains("a device"), "{e}");
        let dir = tempfile::tempdir().unwrap();
        let fifo = dir.path().join("pipe");
        let status = std::process::Command::new("mkfifo").arg(&fifo).status().unwrap();
        assert!(status.success());
        // Without O_NONBLOCK this open would wait for a writer forever.
        let e = open_regular(&fifo).unwrap_err();
        assert!(e.to_string().contains("named pipe"), "{e}");
    }

    #[test]
    fn non_utf8_text_names_the_offset() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("b.txt");
        std::fs::write(&p, b"ok\xff").unwrap();
        let e = read_regular_text(&p, 10).unwrap_err();
        assert!(e.to_string().contains("offset 2"), "{e}");
    }
}
