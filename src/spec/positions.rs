//! Where each node of the spec sits in its file, looked up by key path.
//! serde_yaml reports positions only for syntax and type errors; semantic checks (an unknown
//! item, a tier naming no construct) need the position of the node they blame, so this module
//! replays the YAML as events (yaml-rust2) and records every key and value by its path.
//! Central type: `Positions`. Paths are strings like `constructs.trust.items[2]`.

use std::collections::HashMap;

use yaml_rust2::parser::{Event, MarkedEventReceiver, Parser};
use yaml_rust2::scanner::Marker;

/// A 1-based line and column in the spec file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub struct Position {
    pub line: usize,
    pub column: usize,
}

impl From<Marker> for Position {
    fn from(m: Marker) -> Self {
        // yaml-rust2 markers count lines from 1 and columns from 0.
        Position { line: m.line(), column: m.col() + 1 }
    }
}

/// A mapping key as written, with where it sits.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct KeyEntry {
    pub key: String,
    pub position: Position,
}

/// The positions of every node of one YAML document.
#[derive(Debug, Default, Clone)]
pub struct Positions {
    values: HashMap<String, Position>,
    keys: HashMap<String, Position>,
    /// For each mapping's path, its keys in file order.
    mappings: HashMap<String, Vec<KeyEntry>>,
    /// The length in characters of each scalar value, for carets.
    widths: HashMap<String, usize>,
    /// Keys written twice in one mapping, in file order.
    duplicates: Vec<DuplicateKey>,
}

/// A key that a mapping holds twice: YAML leaves such a file's meaning open (serde keeps the
/// last copy of a map entry), so it is refused.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DuplicateKey {
    /// The mapping's path (`constructs`).
    pub parent: String,
    pub key: String,
    pub first: Position,
    pub second: Position,
}

/// A YAML syntax error with its position.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SyntaxError {
    pub message: String,
    pub position: Position,
}

impl Positions {
    /// Parses `source` and records the position of every key and value. A leading UTF-8
    /// byte-order mark is skipped (editors on some systems write one).
    pub fn index(source: &str) -> Result<Positions, SyntaxError> {
        let source = source.strip_prefix('\u{feff}').unwrap_or(source);
        let mut builder = Builder::default();
        let mut parser = Parser::new_from_str(source);
        parser
            .load(&mut builder, false)
            .map_err(|e| SyntaxError { message: e.info().to_string(), position: Position::from(*e.marker()) })?;
        Ok(builder.positions)
    }

    /// The position of the value at `path` (the start of a scalar, or of a block or flow node).
    pub fn value(&self, path: &str) -> Option<Position> {
        self.values.get(path).copied()
    }

    /// The position of the key that names `path`, falling back to its value.
    pub fn key(&self, path: &str) -> Option<Position> {
        self.keys.get(path).copied().or_else(|| self.value(path))
    }

    /// The keys of the mapping at `path`, in file order (empty if it is not a mapping).
    pub fn keys_of(&self, path: &str) -> &[KeyEntry] {
        self.mappings.get(path).map_or(&[], Vec::as_slice)
    }

    /// Every mapping path recorded.
    pub fn mapping_paths(&self) -> impl Iterator<Item = &str> {
        self.mappings.keys().map(String::as_str)
    }

    /// Keys written twice in one mapping, in file order of their second copy.
    pub fn duplicates(&self) -> &[DuplicateKey] {
        &self.duplicates
    }

    /// The width in characters of the scalar at `path`, for underlining it.
    pub fn width(&self, path: &str) -> Option<usize> {
        self.widths.get(path).copied()
    }
}

/// Joins a parent path and a mapping key.
pub fn child(parent: &str, key: &str) -> String {
    if parent.is_empty() { key.to_string() } else { format!("{parent}.{key}") }
}

/// Joins a parent path and a sequence index.
pub fn element(parent: &str, index: usize) -> String {
    format!("{parent}[{index}]")
}

enum Frame {
    Mapping { path: String, pending_key: Option<String> },
    Sequence { path: String, next: usize },
}

#[derive(Default)]
struct Builder {
    positions: Positions,
    stack: Vec<Frame>,
}

impl Builder {
    /// The path the next value will have, and whether that value is a mapping key.
    fn next_slot(&mut self) -> Slot {
        match self.stack.last_mut() {
            None => Slot::Value(String::new()),
            Some(Frame::Mapping { path, pending_key }) => match pending_key.take() {
                Some(key) => Slot::Value(child(path, &key)),
                None => Slot::Key(path.clone()),
            },
            Some(Frame::Sequence { path, next }) => {
                let p = element(path, *next);
                *next += 1;
                Slot::Value(p)
            }
        }
    }
}

enum Slot {
    Key(String),
    Value(String),
}

impl MarkedEventReceiver for Builder {
    fn on_event(&mut self, ev: Event, mark: Marker) {
        let position = Position::from(mark);
        match ev {
            Event::Scalar(text, ..) => match self.next_slot() {
                Slot::Key(map_path) => {
                    let path = child(&map_path, &text);
                    let entries = self.positions.mappings.entry(map_path.clone()).or_default();
                    if let Some(first) = entries.iter().find(|e| e.key == text) {
                        self.positions.duplicates.push(DuplicateKey {
                            parent: map_path,
                            key: text.clone(),
                            first: first.position,
                            second: position,
                        });
                    }
                    entries.push(KeyEntry { key: text.clone(), position });
                    self.positions.keys.insert(path, position);
                    if let Some(Frame::Mapping { pending_key, .. }) = self.stack.last_mut() {
                        *pending_key = Some(text);
                    }
                }
                Slot::Value(path) => {
                    self.positions.widths.insert(path.clone(), text.chars().count().max(1));
                    self.positions.values.insert(path, position);
                }
            },
            Event::MappingStart(..) => {
                let path = match self.next_slot() {
                    Slot::Value(p) | Slot::Key(p) => p,
                };
                self.positions.values.insert(path.clone(), position);
                // A mapping seen before at this path sits under a repeated key (reported as
                // such); its keys start afresh so the two copies are not mixed up.
                self.positions.mappings.insert(path.clone(), Vec::new());
                self.stack.push(Frame::Mapping { path, pending_key: None });
            }
            Event::SequenceStart(..) => {
                let path = match self.next_slot() {
                    Slot::Value(p) | Slot::Key(p) => p,
                };
                self.positions.values.insert(path.clone(), position);
                self.stack.push(Frame::Sequence { path, next: 0 });
            }
            Event::MappingEnd | Event::SequenceEnd => {
                self.stack.pop();
            }
            Event::Alias(_) => {
                let _ = self.next_slot();
            }
            _ => {}
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const SOURCE: &str = "construe: 1\ntitle: T\nconstructs:\n  trust: {items: [tr1, tr2]}\n  crowding:\n    items:\n      - cr1\n      - cr2\n";

    #[test]
    fn records_block_and_flow_positions() {
        let p = Positions::index(SOURCE).unwrap();
        assert_eq!(p.key("title"), Some(Position { line: 2, column: 1 }));
        assert_eq!(p.value("constructs.trust.items[1]"), Some(Position { line: 4, column: 24 }));
        assert_eq!(p.value("constructs.crowding.items[1]"), Some(Position { line: 8, column: 9 }));
        let keys: Vec<&str> = p.keys_of("constructs").iter().map(|k| k.key.as_str()).collect();
        assert_eq!(keys, ["trust", "crowding"]);
    }

    #[test]
    fn repeated_keys_are_found_at_every_level() {
        let src = "title: a\nconstructs:\n  t: {items: [a]}\n  t:\n    items: [b]\n    items: [c]\ntitle: b\n";
        let p = Positions::index(src).unwrap();
        let found: Vec<(String, String, usize, usize)> =
            p.duplicates().iter().map(|d| (d.parent.clone(), d.key.clone(), d.first.line, d.second.line)).collect();
        assert_eq!(
            found,
            [
                ("constructs".to_string(), "t".to_string(), 3, 4),
                ("constructs.t".to_string(), "items".to_string(), 5, 6),
                (String::new(), "title".to_string(), 1, 7),
            ]
        );
    }

    #[test]
    fn a_byte_order_mark_is_skipped() {
        let p = Positions::index("\u{feff}construe: 1\ntitle: T\n").unwrap();
        assert_eq!(p.key("construe"), Some(Position { line: 1, column: 1 }));
    }

    #[test]
    fn syntax_error_has_a_position() {
        let err = Positions::index("a: [1, 2\nb: 3\n").unwrap_err();
        assert!(err.position.line >= 1);
    }
}
