//! A structural check of a Parquet file's footer before polars reads it. Central function:
//! `check_footer`.
//! Why it exists: polars decodes the footer's Thrift lists and strings with capacities taken
//! from the file, so one damaged length field makes it ask for tens of gigabytes, and a failed
//! allocation aborts the process (it cannot be caught like a panic; fuzzing found such a file).
//! polars also reads each known field by its id, whatever Thrift type the file declares for
//! it, so a footer is accepted only if every field polars reads has the type the Parquet
//! format gives it (the `Shape` tables below), every list, string and map fits in the bytes
//! that follow it, and every column chunk lies inside the file; such a footer decodes in memory
//! proportional to its own size.
//! Never interprets the data pages; it reads only the footer (Thrift compact protocol, Apache
//! Thrift 0.9 specification; Parquet format 2.x `FileMetaData`).

use std::io::{Read, Seek, SeekFrom};
use std::path::Path;

/// Parquet files begin and end with this magic.
const MAGIC: &[u8; 4] = b"PAR1";

/// Deepest nesting of Thrift structs and containers accepted; real footers nest five deep.
const MAX_DEPTH: usize = 64;

/// Field-id paths (FileMetaData -> row_groups -> columns -> ...) of the integers that are byte
/// offsets or sizes within the file: ColumnChunk.file_offset and ColumnMetaData's
/// total_compressed_size, data_page_offset, index_page_offset and dictionary_page_offset.
const IN_FILE: [&[i16]; 5] = [&[4, 1, 2], &[4, 1, 3, 7], &[4, 1, 3, 9], &[4, 1, 3, 10], &[4, 1, 3, 11]];

/// What a field (or a list's elements) must be, as polars reads it.
#[derive(Debug, Clone, Copy)]
enum Shape {
    I8,
    /// i16, i32 or i64: all are zigzag varints, so any of them keeps the reader aligned.
    Int,
    Bool,
    Binary,
    List(&'static Shape),
    Struct(&'static [(i16, Shape)]),
}

/// Thrift compact type codes by name, for messages.
fn type_name(kind: u8) -> &'static str {
    match kind {
        1 | 2 => "a boolean",
        3 => "a byte",
        4..=6 => "an integer",
        7 => "a double",
        8 => "a string",
        9 => "a list",
        10 => "a set",
        11 => "a map",
        12 => "a struct",
        _ => "an unknown type",
    }
}

impl Shape {
    fn name(self) -> &'static str {
        match self {
            Shape::I8 => "a byte",
            Shape::Int => "an integer",
            Shape::Bool => "a boolean",
            Shape::Binary => "a string",
            Shape::List(_) => "a list",
            Shape::Struct(_) => "a struct",
        }
    }

    /// Whether compact type `kind` is how this shape is written.
    fn accepts(self, kind: u8) -> bool {
        match self {
            Shape::I8 => kind == 3,
            Shape::Int => matches!(kind, 4..=6),
            Shape::Bool => matches!(kind, 1 | 2),
            Shape::Binary => kind == 8,
            Shape::List(_) => matches!(kind, 9 | 10),
            Shape::Struct(_) => kind == 12,
        }
    }
}

use Shape::{Binary, Bool, I8, Int, List, Struct};

/// The structs of `FileMetaData` that polars decodes, with the fields it reads by id (Parquet
/// format's parquet.thrift); fields not listed are skipped by their declared type.
static EMPTY: [(i16, Shape); 0] = [];
static TIME_UNIT: [(i16, Shape); 3] = [(1, Struct(&EMPTY)), (2, Struct(&EMPTY)), (3, Struct(&EMPTY))];
static DECIMAL: [(i16, Shape); 2] = [(1, Int), (2, Int)];
static TIME: [(i16, Shape); 2] = [(1, Bool), (2, Struct(&TIME_UNIT))];
static INTEGER: [(i16, Shape); 2] = [(1, I8), (2, Bool)];
static LOGICAL_TYPE: [(i16, Shape); 14] = [
    (1, Struct(&EMPTY)),
    (2, Struct(&EMPTY)),
    (3, Struct(&EMPTY)),
    (4, Struct(&EMPTY)),
    (5, Struct(&DECIMAL)),
    (6, Struct(&EMPTY)),
    (7, Struct(&TIME)),
    (8, Struct(&TIME)),
    (10, Struct(&INTEGER)),
    (11, Struct(&EMPTY)),
    (12, Struct(&EMPTY)),
    (13, Struct(&EMPTY)),
    (14, Struct(&EMPTY)),
    (15, Struct(&EMPTY)),
];
static SCHEMA_ELEMENT: [(i16, Shape); 10] = [
    (1, Int),
    (2, Int),
    (3, Int),
    (4, Binary),
    (5, Int),
    (6, Int),
    (7, Int),
    (8, Int),
    (9, Int),
    (10, Struct(&LOGICAL_TYPE)),
];
static STATISTICS: [(i16, Shape); 8] =
    [(1, Binary), (2, Binary), (3, Int), (4, Int), (5, Binary), (6, Binary), (7, Bool), (8, Bool)];
static COLUMN_META: [(i16, Shape); 13] = [
    (1, Int),
    (2, List(&Int)),
    (3, List(&Binary)),
    (4, Int),
    (5, Int),
    (6, Int),
    (7, Int),
    (9, Int),
    (10, Int),
    (11, Int),
    (12, Struct(&STATISTICS)),
    (14, Int),
    (15, Int),
];
static COLUMN_CHUNK: [(i16, Shape); 7] =
    [(1, Binary), (2, Int), (3, Struct(&COLUMN_META)), (4, Int), (5, Int), (6, Int), (7, Int)];
static SORTING_COLUMN: [(i16, Shape); 3] = [(1, Int), (2, Bool), (3, Bool)];
static ROW_GROUP: [(i16, Shape); 7] = [
    (1, List(&Struct(&COLUMN_CHUNK))),
    (2, Int),
    (3, Int),
    (4, List(&Struct(&SORTING_COLUMN))),
    (5, Int),
    (6, Int),
    (7, Int),
];
static KEY_VALUE: [(i16, Shape); 2] = [(1, Binary), (2, Binary)];
static COLUMN_ORDER: [(i16, Shape); 2] = [(1, Struct(&EMPTY)), (2, Struct(&EMPTY))];
static FILE_META: [(i16, Shape); 7] = [
    (1, Int),
    (2, List(&Struct(&SCHEMA_ELEMENT))),
    (3, Int),
    (4, List(&Struct(&ROW_GROUP))),
    (5, List(&Struct(&KEY_VALUE))),
    (6, Binary),
    (7, List(&Struct(&COLUMN_ORDER))),
];

/// Why a footer was refused, with the byte offset within the footer where it went wrong.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FooterError(pub String);

impl std::fmt::Display for FooterError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

/// Read the footer of the Parquet file at `path` and check its structure (see the module doc).
pub fn check_footer(path: &Path) -> Result<(), FooterError> {
    let io = |e: std::io::Error| FooterError(e.to_string());
    let mut file = std::fs::File::open(path).map_err(io)?;
    let file_len = file.metadata().map_err(io)?.len();
    if file_len < 12 {
        return Err(FooterError(format!("{file_len} bytes is too short for a Parquet file")));
    }
    let mut tail = [0u8; 8];
    file.seek(SeekFrom::End(-8)).map_err(io)?;
    file.read_exact(&mut tail).map_err(io)?;
    if &tail[4..] != MAGIC {
        return Err(FooterError("the file does not end with the Parquet magic `PAR1`".into()));
    }
    let footer_len = u64::from(u32::from_le_bytes([tail[0], tail[1], tail[2], tail[3]]));
    if footer_len > file_len - 12 {
        return Err(FooterError(format!("the footer claims {footer_len} bytes in a file of {file_len}")));
    }
    let mut footer = vec![0u8; footer_len as usize];
    file.seek(SeekFrom::Start(file_len - 8 - footer_len)).map_err(io)?;
    file.read_exact(&mut footer).map_err(io)?;
    check_metadata(&footer, file_len)
}

/// Walk the Thrift-encoded `FileMetaData` in `footer` (a file of `file_len` bytes).
pub fn check_metadata(footer: &[u8], file_len: u64) -> Result<(), FooterError> {
    let mut walker = Walker { bytes: footer, at: 0, file_len, path: Vec::new() };
    walker.structure(0, &FILE_META)
}

struct Walker<'a> {
    bytes: &'a [u8],
    at: usize,
    file_len: u64,
    /// Field ids from the outermost struct to the current field.
    path: Vec<i16>,
}

impl Walker<'_> {
    fn fail(&self, what: &str) -> FooterError {
        FooterError(format!("damaged Parquet footer at byte {}: {what}", self.at))
    }

    fn remaining(&self) -> usize {
        self.bytes.len() - self.at
    }

    fn byte(&mut self) -> Result<u8, FooterError> {
        let b = *self.bytes.get(self.at).ok_or_else(|| self.fail("it ends inside a value"))?;
        self.at += 1;
        Ok(b)
    }

    fn skip(&mut self, n: usize) -> Result<(), FooterError> {
        if n > self.remaining() {
            return Err(self.fail(&format!("{n} bytes declared, {} left", self.remaining())));
        }
        self.at += n;
        Ok(())
    }

    fn varint(&mut self) -> Result<u64, FooterError> {
        let mut value = 0u64;
        for shift in (0..70).step_by(7) {
            let b = self.byte()?;
            value |= u64::from(b & 0x7f) << shift.min(63);
            if b & 0x80 == 0 {
                return Ok(value);
            }
        }
        Err(self.fail("an integer longer than ten bytes"))
    }

    fn zigzag(&mut self) -> Result<i64, FooterError> {
        let v = self.varint()?;
        Ok((v >> 1) as i64 ^ -((v & 1) as i64))
    }

    /// A container's element count, which must not exceed the bytes left (every element takes
    /// at least one byte), so no count can make the decoder reserve more than the footer's size.
    fn count(&mut self, declared: u64) -> Result<usize, FooterError> {
        if declared > self.remaining() as u64 {
            return Err(self.fail(&format!("{declared} elements declared, {} bytes left", self.remaining())));
        }
        Ok(declared as usize)
    }

    /// A struct whose known fields are `fields` (empty: skip every field by its type).
    fn structure(&mut self, depth: usize, fields: &'static [(i16, Shape)]) -> Result<(), FooterError> {
        if depth > MAX_DEPTH {
            return Err(self.fail("structures nested too deeply"));
        }
        let mut last_id: i16 = 0;
        loop {
            let header = self.byte()?;
            if header == 0 {
                return Ok(());
            }
            let kind = header & 0x0f;
            let delta = i16::from(header >> 4);
            let id = if delta == 0 {
                i16::try_from(self.zigzag()?).map_err(|_| self.fail("a field id out of range"))?
            } else {
                last_id.checked_add(delta).ok_or_else(|| self.fail("a field id out of range"))?
            };
            last_id = id;
            let shape = fields.iter().find(|(f, _)| *f == id).map(|(_, s)| *s);
            if let Some(shape) = shape.filter(|s| !s.accepts(kind)) {
                return Err(self.fail(&format!(
                    "field {id} is {} where the Parquet format has {}",
                    type_name(kind),
                    shape.name()
                )));
            }
            self.path.push(id);
            let result = self.value(kind, shape, depth, true);
            self.path.pop();
            result?;
        }
    }

    /// One value of compact type `kind` (already checked against `shape`); booleans carry no
    /// payload as struct fields but one byte as container elements.
    fn value(&mut self, kind: u8, shape: Option<Shape>, depth: usize, in_field: bool) -> Result<(), FooterError> {
        match kind {
            1 | 2 if in_field => Ok(()),
            1..=3 => self.skip(1),
            4..=6 => {
                let v = self.zigzag()?;
                self.check_offset(v)
            }
            7 => self.skip(8),
            8 => {
                let len = self.varint()?;
                let len = usize::try_from(len).map_err(|_| self.fail("a string length out of range"))?;
                self.skip(len)
            }
            9 | 10 => {
                let header = self.byte()?;
                let short = u64::from(header >> 4);
                let declared = if short == 15 { self.varint()? } else { short };
                let n = self.count(declared)?;
                let element = header & 0x0f;
                let element_shape = match shape {
                    Some(List(e)) => Some(*e),
                    _ => None,
                };
                if let Some(e) = element_shape.filter(|e| n > 0 && !e.accepts(element)) {
                    return Err(self.fail(&format!(
                        "list elements are {} where the Parquet format has {}",
                        type_name(element),
                        e.name()
                    )));
                }
                (0..n).try_for_each(|_| self.element(element, element_shape, depth))
            }
            11 => {
                let declared = self.varint()?;
                let n = self.count(declared)?;
                if n == 0 {
                    return Ok(());
                }
                let types = self.byte()?;
                (0..n).try_for_each(|_| {
                    self.element(types >> 4, None, depth)?;
                    self.element(types & 0x0f, None, depth)
                })
            }
            12 => {
                let fields = match shape {
                    Some(Struct(f)) => f,
                    _ => &EMPTY,
                };
                self.structure(depth + 1, fields)
            }
            other => Err(self.fail(&format!("unknown Thrift type {other}"))),
        }
    }

    fn element(&mut self, kind: u8, shape: Option<Shape>, depth: usize) -> Result<(), FooterError> {
        if depth + 1 > MAX_DEPTH {
            return Err(self.fail("containers nested too deeply"));
        }
        self.value(kind, shape, depth + 1, false)
    }

    fn check_offset(&self, v: i64) -> Result<(), FooterError> {
        let is_offset = IN_FILE.contains(&self.path.as_slice());
        if is_offset && (v < 0 || v as u64 > self.file_len) {
            return Err(
                self.fail(&format!("a column chunk offset or size {v} outside the file of {} bytes", self.file_len))
            );
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The demo's autumn wave, written by polars: a real footer must pass.
    fn demo_parquet() -> std::path::PathBuf {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines/transit/data/riders-autumn.parquet")
    }

    #[test]
    fn a_real_footer_passes() {
        check_footer(&demo_parquet()).unwrap();
    }

    #[test]
    fn a_list_longer_than_the_footer_is_refused() {
        // Compact protocol by hand: field 2 (schema, delta 2) of type list (9), header 0xFC =
        // long size + element type struct (12), then the size varint 2^31.
        let footer = [0x29, 0xfc, 0x80, 0x80, 0x80, 0x80, 0x08, 0x00];
        let err = check_metadata(&footer, 1000).unwrap_err();
        assert!(err.0.contains("elements declared"), "{err}");
        // A string (created_by, field 6) longer than what is left.
        let footer = [0x68, 0x7f, b'a', 0x00];
        assert!(check_metadata(&footer, 1000).unwrap_err().0.contains("bytes declared"));
        // Deep nesting of structs (in field 8, which polars does not read).
        let mut deep = vec![0x8c; 200];
        deep.extend([0u8; 201]);
        assert!(check_metadata(&deep, 1000).unwrap_err().0.contains("nested too deeply"));
        // Truncated in the middle of a varint, and an unknown type.
        assert!(check_metadata(&[0x15, 0x80], 1000).is_err());
        assert!(check_metadata(&[0x8e, 0x00], 1000).unwrap_err().0.contains("unknown Thrift type"));
    }

    #[test]
    fn a_field_polars_reads_must_have_the_formats_type() {
        // key_value_metadata (field 5) declared as a map: polars would read a list header from
        // the map's bytes (the fuzzed file that made it ask for 64 GB).
        let footer = [0x5b, 0x00, 0x00];
        let err = check_metadata(&footer, 1000).unwrap_err().0;
        assert!(err.contains("field 5 is a map where the Parquet format has a list"), "{err}");
        // Schema elements (field 2) declared as a list of i32.
        let footer = [0x29, 0x15, 0x02, 0x00];
        let err = check_metadata(&footer, 1000).unwrap_err().0;
        assert!(err.contains("list elements are an integer where the Parquet format has a struct"), "{err}");
        // The same shapes with the right types pass: version 2 and an empty schema list.
        assert!(check_metadata(&[0x15, 0x04, 0x19, 0x0c, 0x00], 1000).is_ok());
    }

    #[test]
    fn a_column_chunk_outside_the_file_is_refused() {
        // FileMetaData.row_groups (field 4, list of 1 struct) -> RowGroup.columns (field 1,
        // list of 1 struct) -> ColumnChunk.meta_data (field 3, struct) -> data_page_offset
        // (field 9, i64) = 5000 in a 1000-byte file.
        let zig = |v: u64| v << 1;
        let mut footer = vec![0x49, 0x1c, 0x19, 0x1c, 0x3c, 0x96];
        let mut v = zig(5000);
        while v >= 0x80 {
            footer.push((v as u8 & 0x7f) | 0x80);
            v >>= 7;
        }
        footer.push(v as u8);
        footer.extend([0x00, 0x00, 0x00, 0x00]);
        let err = check_metadata(&footer, 1000).unwrap_err();
        assert!(err.0.contains("outside the file"), "{err}");
        assert!(check_metadata(&footer, 10_000).is_ok());
    }

    #[test]
    fn files_without_the_magic_or_with_an_oversized_footer_are_refused() {
        let dir = tempfile::tempdir().unwrap();
        let short = dir.path().join("short.parquet");
        std::fs::write(&short, b"PAR1").unwrap();
        assert!(check_footer(&short).is_err());
        let big = dir.path().join("big.parquet");
        let mut bytes = b"PAR1".to_vec();
        bytes.extend([0u8; 20]);
        bytes.extend(1_000_000u32.to_le_bytes());
        bytes.extend(MAGIC);
        std::fs::write(&big, &bytes).unwrap();
        assert!(check_footer(&big).unwrap_err().0.contains("claims"));
    }
}
