//! Rendering spec problems for people: `file:line:col`, the offending line, a caret under the
//! blamed node, and an optional hint. Central type: `Diagnostic`; `Report` holds all of a
//! check's diagnostics sorted by position. Only this module decides how a problem looks.

use std::fmt;
use std::path::{Path, PathBuf};

use super::positions::Position;

#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Severity {
    Error,
    Warning,
}

/// Where a diagnostic points: a file, and a position in it when the problem has one.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Location {
    pub file: PathBuf,
    pub position: Option<Position>,
    /// How many characters to underline.
    pub width: usize,
}

/// One problem found in a spec or its data, ready to print.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Diagnostic {
    pub severity: Severity,
    pub message: String,
    pub location: Option<Location>,
    /// The text of the offending line, for the caret display.
    pub line_text: Option<String>,
    pub help: Option<String>,
}

impl Diagnostic {
    pub fn error(message: impl Into<String>) -> Self {
        Diagnostic { severity: Severity::Error, message: message.into(), location: None, line_text: None, help: None }
    }

    pub fn warning(message: impl Into<String>) -> Self {
        Diagnostic { severity: Severity::Warning, ..Diagnostic::error(message) }
    }

    /// Points the diagnostic at `position` in `file`, quoting that line of `source`.
    pub fn at(mut self, file: &Path, source: &str, position: Option<Position>, width: usize) -> Self {
        self.line_text = position.and_then(|p| source.lines().nth(p.line.saturating_sub(1))).map(str::to_string);
        self.location = Some(Location { file: file.to_path_buf(), position, width: width.max(1) });
        self
    }

    pub fn with_help(mut self, help: impl Into<String>) -> Self {
        self.help = Some(help.into());
        self
    }

    pub fn with_help_opt(mut self, help: Option<String>) -> Self {
        self.help = help;
        self
    }

    pub fn is_error(&self) -> bool {
        self.severity == Severity::Error
    }

    fn sort_key(&self) -> (Option<Position>, Severity) {
        (self.location.as_ref().and_then(|l| l.position), self.severity)
    }
}

impl fmt::Display for Diagnostic {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let label = match self.severity {
            Severity::Error => "error",
            Severity::Warning => "warning",
        };
        writeln!(f, "{label}: {}", self.message)?;
        if let Some(loc) = &self.location {
            match loc.position {
                Some(p) => writeln!(f, "  at {}:{}:{}", loc.file.display(), p.line, p.column)?,
                None => writeln!(f, "  in {}", loc.file.display())?,
            }
            if let (Some(p), Some(text)) = (loc.position, &self.line_text) {
                let gutter = p.line.to_string().len();
                writeln!(f, "  {:>gutter$} | {text}", p.line)?;
                let pad = " ".repeat(p.column.saturating_sub(1));
                writeln!(f, "  {:>gutter$} | {pad}{}", "", "^".repeat(loc.width))?;
            }
        }
        if let Some(help) = &self.help {
            writeln!(f, "  hint: {help}")?;
        }
        Ok(())
    }
}

/// Every diagnostic of one check, sorted by position, errors before warnings at a position.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Report {
    pub diagnostics: Vec<Diagnostic>,
}

impl Report {
    pub fn push(&mut self, d: Diagnostic) {
        self.diagnostics.push(d);
    }

    pub fn extend(&mut self, other: Report) {
        self.diagnostics.extend(other.diagnostics);
    }

    pub fn has_errors(&self) -> bool {
        self.diagnostics.iter().any(Diagnostic::is_error)
    }

    pub fn error_count(&self) -> usize {
        self.diagnostics.iter().filter(|d| d.is_error()).count()
    }

    pub fn warning_count(&self) -> usize {
        self.diagnostics.len() - self.error_count()
    }

    /// Sorts by position so a reader can walk the file top to bottom.
    pub fn sort(&mut self) {
        self.diagnostics.sort_by_key(Diagnostic::sort_key);
        self.diagnostics.dedup();
    }
}

impl fmt::Display for Report {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for d in &self.diagnostics {
            writeln!(f, "{d}")?;
        }
        let (e, w) = (self.error_count(), self.warning_count());
        write!(f, "{} and {}", plural(e, "error"), plural(w, "warning"))
    }
}

impl std::error::Error for Report {}

/// "1 item", "3 items".
pub fn plural(n: usize, word: &str) -> String {
    if n == 1 { format!("1 {word}") } else { format!("{n} {word}s") }
}

/// The closest candidate to `word` when it is close enough to be a likely typo: at most one
/// edit per three characters (Damerau–Levenshtein, so a swapped pair counts once), ties broken
/// by Jaro–Winkler similarity.
pub fn suggest<'a>(word: &str, candidates: impl IntoIterator<Item = &'a str>) -> Option<String> {
    let budget = (word.chars().count() / 3).max(1);
    candidates
        .into_iter()
        .filter(|c| *c != word)
        .map(|c| (strsim::damerau_levenshtein(word, c), -strsim::jaro_winkler(word, c), c))
        .filter(|(d, _, _)| *d <= budget)
        .min_by(|a, b| a.0.cmp(&b.0).then(a.1.total_cmp(&b.1)))
        .map(|(_, _, c)| format!("did you mean `{c}`?"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn renders_caret_under_the_column() {
        let src = "a: 1\nanalyses:\n  purfy: {}\n";
        let d = Diagnostic::error("unknown key `purfy` in `analyses`")
            .at(Path::new("spec.yaml"), src, Some(Position { line: 3, column: 3 }), 5)
            .with_help("did you mean `purify`?");
        let expected = "error: unknown key `purfy` in `analyses`\n  at spec.yaml:3:3\n  3 |   purfy: {}\n    |   ^^^^^\n  hint: did you mean `purify`?\n";
        assert_eq!(d.to_string(), expected);
    }

    #[test]
    fn suggestions_only_for_near_misses() {
        assert_eq!(suggest("purfy", ["purify", "measure"]), Some("did you mean `purify`?".into()));
        assert_eq!(suggest("zzz", ["purify", "measure"]), None);
        assert_eq!(suggest("bb3", ["b1", "b2", "b3", "x"]), Some("did you mean `b3`?".into()));
        assert_eq!(suggest("puncutality", ["punctuality", "trust"]), Some("did you mean `punctuality`?".into()));
    }

    #[test]
    fn plurals() {
        assert_eq!(plural(1, "item"), "1 item");
        assert_eq!(plural(3, "item"), "3 items");
    }
}
