//! Text from specs and data made safe to print: `visible` writes out invisible and
//! direction-changing characters (a right-to-left override could make a name read as
//! something else, issue 13), `markdown_text` escapes Markdown structure and HTML, `code_span`
//! builds a code span around any text. Central function: `markdown_text`. Used by the
//! template formatter and filters in `report` and by `svg::escape`; nothing here reads files.

/// Whether `c` is invisible or changes the direction or shaping of the text around it:
/// control characters, the bidirectional embeddings, overrides, isolates and marks
/// (U+202A–U+202E, U+2066–U+2069, U+200E, U+200F, U+061C), zero-width and other format
/// characters (Unicode category Cf), line and paragraph separators, and the Hangul fillers
/// that render as blanks.
pub fn is_invisible(c: char) -> bool {
    c.is_control()
        || matches!(
            c,
            '\u{00AD}'
                | '\u{061C}'
                | '\u{0600}'..='\u{0605}'
                | '\u{06DD}'
                | '\u{070F}'
                | '\u{0890}'..='\u{0891}'
                | '\u{08E2}'
                | '\u{115F}'..='\u{1160}'
                | '\u{180E}'
                | '\u{200B}'..='\u{200F}'
                | '\u{2028}'..='\u{202E}'
                | '\u{2060}'..='\u{206F}'
                | '\u{3164}'
                | '\u{FEFF}'
                | '\u{FFA0}'
                | '\u{FFF9}'..='\u{FFFB}'
                | '\u{110BD}'
                | '\u{110CD}'
                | '\u{13430}'..='\u{1343F}'
                | '\u{1BCA0}'..='\u{1BCA3}'
                | '\u{1D173}'..='\u{1D17A}'
                | '\u{E0000}'..='\u{E007F}'
        )
}

/// `s` with every invisible character (`is_invisible`) written out as `<U+XXXX>`, so what a
/// reader sees is what the spec or data holds. Line breaks and tabs become spaces: a value
/// printed in a report never starts a new line (where Markdown would read structure).
pub fn visible(s: &str) -> String {
    if !s.chars().any(is_invisible) {
        return s.to_string();
    }
    let mut out = String::with_capacity(s.len() + 8);
    for c in s.chars() {
        match c {
            '\n' | '\r' | '\t' => out.push(' '),
            c if is_invisible(c) => out.push_str(&format!("<U+{:04X}>", u32::from(c))),
            c => out.push(c),
        }
    }
    out
}

/// Text safe anywhere in a Markdown line, table cells included: invisible characters shown
/// (`visible`); `&`, `<`, `>` as entities, so a name like `<script>` is text in any renderer;
/// backslash escapes for inline structure (`\` `` ` `` `*` `[` `]` `|` `~` `#`, and `_` where
/// it could open or close emphasis, that is, not between two letters or digits); and at the
/// start, where the value may begin a line, whatever could open a block (a list marker, a
/// numbered item, a setext underline, indentation).
pub fn markdown_text(s: &str) -> String {
    let chars: Vec<char> = visible(s).chars().collect();
    let mut out = String::with_capacity(chars.len() + 8);
    let mut leading = true;
    for (k, &c) in chars.iter().enumerate() {
        let prev = k.checked_sub(1).map(|j| chars[j]);
        let next = chars.get(k + 1).copied();
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            ' ' if leading => out.push_str("&#32;"),
            '\\' | '`' | '*' | '[' | ']' | '|' | '~' | '#' => {
                out.push('\\');
                out.push(c);
            }
            '_' if !(prev.is_some_and(char::is_alphanumeric) && next.is_some_and(char::is_alphanumeric)) => {
                out.push_str("\\_");
            }
            // `- x`, `+ x`, `---`, `===`: a list item, a thematic break, a setext underline.
            '-' | '+' if k == 0 && matches!(next, None | Some(' ' | '-')) => {
                out.push('\\');
                out.push(c);
            }
            '=' if k == 0 => {
                out.push('\\');
                out.push(c);
            }
            // `12. x`, `3) x`: a numbered list item.
            '.' | ')'
                if (1..=9).contains(&k)
                    && chars[..k].iter().all(char::is_ascii_digit)
                    && matches!(next, None | Some(' ')) =>
            {
                out.push('\\');
                out.push(c);
            }
            _ => out.push(c),
        }
        if c != ' ' {
            leading = false;
        }
    }
    out
}

/// A Markdown code span holding `s` literally: invisible characters shown (`visible`), a
/// fence of one more backtick than the longest run inside, padded when the text begins or
/// ends with a backtick, and pipes escaped so the span can sit in a table cell.
pub fn code_span(s: &str) -> String {
    let text = visible(s).replace('|', "\\|");
    let mut longest = 0;
    let mut run = 0;
    for c in text.chars() {
        run = if c == '`' { run + 1 } else { 0 };
        longest = longest.max(run);
    }
    let fence = "`".repeat(longest + 1);
    if text.is_empty() {
        return "` `".into();
    }
    let pad = if text.starts_with('`') || text.ends_with('`') { " " } else { "" };
    format!("{fence}{pad}{text}{pad}{fence}")
}

/// `v` written with `digits` significant digits, trailing zeros kept (`1.00`, `4990`); for
/// numbers already rounded to that many digits. `None` for NaN and infinities.
pub fn significant(v: f64, digits: i32) -> Option<String> {
    if !v.is_finite() {
        return None;
    }
    if v == 0.0 {
        return Some("0".into());
    }
    let decimals = (digits - 1 - v.abs().log10().floor() as i32).max(0) as usize;
    Some(format!("{v:.decimals$}"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn invisible_characters_are_written_out() {
        assert_eq!(visible("abc"), "abc");
        assert_eq!(visible("a\u{202E}b\u{2066}c\u{200F}\u{061C}"), "a<U+202E>b<U+2066>c<U+200F><U+061C>");
        assert_eq!(visible("zero\u{200B}width\u{FEFF}"), "zero<U+200B>width<U+FEFF>");
        assert_eq!(visible("two\nlines\tand\u{7}"), "two lines and<U+0007>");
        assert_eq!(visible("naïve café → β"), "naïve café → β");
    }

    #[test]
    fn markdown_text_escapes_html_and_structure() {
        assert_eq!(markdown_text("<b>x</b> & y"), "&lt;b&gt;x&lt;/b&gt; &amp; y");
        assert_eq!(markdown_text("*a* [l](u) `c` a|b ~s~ #1 \\"), "\\*a\\* \\[l\\](u) \\`c\\` a\\|b \\~s\\~ \\#1 \\\\");
        assert_eq!(markdown_text("fare_burden"), "fare_burden");
        assert_eq!(markdown_text("_x_ y_"), "\\_x\\_ y\\_");
        assert_eq!(markdown_text("- item"), "\\- item");
        assert_eq!(markdown_text("-0.5"), "-0.5");
        assert_eq!(markdown_text("---"), "\\---");
        assert_eq!(markdown_text("12. x"), "12\\. x");
        assert_eq!(markdown_text("0.01"), "0.01");
        assert_eq!(markdown_text("=== "), "\\=== ");
        assert_eq!(markdown_text("    code"), "&#32;&#32;&#32;&#32;code");
        assert_eq!(markdown_text("x\u{202E}y"), "x&lt;U+202E&gt;y");
        assert_eq!(markdown_text("a\n# b"), "a \\# b");
    }

    #[test]
    fn significant_digits_keep_trailing_zeros() {
        assert_eq!(significant(1.0, 3).as_deref(), Some("1.00"));
        assert_eq!(significant(4990.0, 3).as_deref(), Some("4990"));
        assert_eq!(significant(97000.0, 2).as_deref(), Some("97000"));
        assert_eq!(significant(0.012, 2).as_deref(), Some("0.012"));
        assert_eq!(significant(-2.5, 2).as_deref(), Some("-2.5"));
        assert_eq!(significant(0.0, 3).as_deref(), Some("0"));
        assert_eq!(significant(f64::NAN, 3), None);
    }

    #[test]
    fn code_spans_hold_any_backticks() {
        assert_eq!(code_span("a.csv"), "`a.csv`");
        assert_eq!(code_span("a`b"), "``a`b``");
        assert_eq!(code_span("`x``"), "``` `x`` ```");
        assert_eq!(code_span("a|b"), "`a\\|b`");
        assert_eq!(code_span(""), "` `");
        assert_eq!(code_span("r\u{202E}"), "`r<U+202E>`");
    }
}
