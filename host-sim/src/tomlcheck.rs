//! Reading the project's TOML files (scenarios, receiver profiles) with errors a person can act
//! on: the file, the line and column, the key (dotted, with the array index of a `[[table]]`
//! entry, e.g. `gates[2].centre_slot`), and what range was expected.

use serde::de::DeserializeOwned;
use std::fmt;
use std::path::Path;

/// A TOML file that could not be read: which file, where, which key, and why.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TomlError {
    /// File name (or other source name) the text came from.
    pub source: String,
    /// 1-based line of the offending key, when known.
    pub line: Option<usize>,
    /// 1-based column, when known.
    pub column: Option<usize>,
    /// Byte offset into the text, when known.
    pub byte: Option<usize>,
    /// The offending key, when known.
    pub key: Option<String>,
    /// What is wrong.
    pub message: String,
}

impl TomlError {
    /// An error about the whole file (cannot be read, and the like).
    pub fn file(source: &str, message: impl Into<String>) -> Self {
        Self {
            source: source.to_string(),
            line: None,
            column: None,
            byte: None,
            key: None,
            message: message.into(),
        }
    }
}

impl fmt::Display for TomlError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}:", self.source)?;
        if let Some(l) = self.line {
            write!(f, " line {l}")?;
            if let Some(c) = self.column {
                write!(f, ", column {c}")?;
            }
            if let Some(b) = self.byte {
                write!(f, " (byte {b})")?;
            }
            write!(f, ":")?;
        }
        if let Some(k) = &self.key {
            write!(f, " key '{k}':")?;
        }
        write!(f, " {}", self.message)
    }
}

impl std::error::Error for TomlError {}

/// Read a file's text; the error names the file.
pub fn read(path: &Path) -> Result<(String, String), TomlError> {
    let name = path.display().to_string();
    match std::fs::read_to_string(path) {
        Ok(t) => Ok((t, name)),
        Err(e) => Err(TomlError::file(&name, format!("cannot read: {e}"))),
    }
}

/// Deserialize `text`; a syntax error, a wrong type or an unknown key is reported where it is, a
/// missing key by its name.
pub fn parse<T: DeserializeOwned>(text: &str, source: &str) -> Result<T, TomlError> {
    toml::from_str(text).map_err(|e| {
        let missing = e
            .message()
            .strip_prefix("missing field `")
            .and_then(|m| m.split_once('`'))
            .map(|(k, _)| k.to_string());
        let (line, column, byte, key) = match e.span() {
            // A missing key has no place in the text; name it instead.
            _ if missing.is_some() => (None, None, None, missing),
            Some(span) => {
                let (l, c, k) = locate(text, span.start);
                (Some(l), Some(c), Some(span.start), k)
            }
            None => (None, None, None, None),
        };
        TomlError {
            source: source.to_string(),
            line,
            column,
            byte,
            key,
            message: e.message().trim().to_string(),
        }
    })
}

/// Line, column (both 1-based) and key name at a byte offset of a TOML text.
fn locate(text: &str, byte: usize) -> (usize, usize, Option<String>) {
    let byte = byte.min(text.len());
    let before = text.get(..byte).unwrap_or("");
    let line = before.matches('\n').count() + 1;
    let line_start = before.rfind('\n').map_or(0, |i| i + 1);
    let column = before.len() - line_start + 1;
    let line_text = text
        .get(line_start..)
        .unwrap_or("")
        .lines()
        .next()
        .unwrap_or("");
    let key = line_text
        .split_once('=')
        .map(|(k, _)| k.trim().to_string())
        .filter(|k| !k.is_empty() && !k.starts_with('#'));
    (line, column, key)
}

/// Byte offset of the line that assigns `path`: `key` anywhere, `table.key` inside `[table]`,
/// `table[i].key` inside the i-th (0-based) `[[table]]`, or a table's header by its path alone.
fn find_key(text: &str, path: &str) -> Option<usize> {
    let (table, key) = match path.rsplit_once('.') {
        Some((t, k)) => (Some(t), k),
        None => (None, path),
    };
    let mut offset = 0;
    let mut current = String::new();
    let mut entries: Vec<(String, usize)> = Vec::new();
    for line in text.split_inclusive('\n') {
        let at = offset + (line.len() - line.trim_start().len());
        offset += line.len();
        let t = line.trim();
        if let Some(name) = t.strip_prefix("[[").and_then(|r| r.split_once("]]")) {
            let name = name.0.trim().to_string();
            let i = match entries.iter_mut().find(|(n, _)| *n == name) {
                Some((_, k)) => {
                    *k += 1;
                    *k - 1
                }
                None => {
                    entries.push((name.clone(), 1));
                    0
                }
            };
            current = format!("{name}[{i}]");
            if current == path || (i == 0 && name == path) {
                return Some(at);
            }
            continue;
        }
        if let Some(name) = t.strip_prefix('[').and_then(|r| r.split_once(']')) {
            current = name.0.trim().to_string();
            if current == path {
                return Some(at);
            }
            continue;
        }
        let Some((k, _)) = t.split_once('=') else {
            continue;
        };
        if k.trim() == key && table.is_none_or(|tb| tb == current) {
            return Some(at);
        }
    }
    None
}

/// Checks of deserialized values against the text they came from (which may be empty).
pub struct Check<'a> {
    /// Name of the source in errors.
    pub source: &'a str,
    /// The TOML text, to find a key's line.
    pub text: &'a str,
}

impl Check<'_> {
    /// An error about `key` (a dotted path, see [`TomlError`]), placed at its line when found.
    pub fn err(&self, key: &str, message: impl Into<String>) -> TomlError {
        let (line, column, byte) = match find_key(self.text, key) {
            Some(b) => {
                let (l, c, _) = locate(self.text, b);
                (Some(l), Some(c), Some(b))
            }
            None => (None, None, None),
        };
        TomlError {
            source: self.source.to_string(),
            line,
            column,
            byte,
            key: Some(key.to_string()),
            message: message.into(),
        }
    }

    /// `v` is a finite number.
    pub fn finite(&self, key: &str, v: f64) -> Result<(), TomlError> {
        if v.is_finite() {
            Ok(())
        } else {
            Err(self.err(key, "must be a finite number"))
        }
    }

    /// `lo <= v <= hi` (closed) or `lo < v < hi` (open), chosen per bound.
    pub fn range(&self, key: &str, v: f64, lo: Bound, hi: Bound) -> Result<(), TomlError> {
        self.finite(key, v)?;
        let ok_lo = match lo {
            Bound::Closed(x) => v >= x,
            Bound::Open(x) => v > x,
        };
        let ok_hi = match hi {
            Bound::Closed(x) => v <= x,
            Bound::Open(x) => v < x,
        };
        if ok_lo && ok_hi {
            return Ok(());
        }
        let l = match lo {
            Bound::Closed(x) => format!("[{x}"),
            Bound::Open(x) => format!("({x}"),
        };
        let h = match hi {
            Bound::Closed(x) => format!("{x}]"),
            Bound::Open(x) => format!("{x})"),
        };
        Err(self.err(key, format!("must lie in {l},{h}, got {v}")))
    }
}

/// One end of an allowed range.
#[derive(Clone, Copy, Debug)]
pub enum Bound {
    /// The end itself is allowed.
    Closed(f64),
    /// The end itself is not allowed.
    Open(f64),
}

#[cfg(test)]
mod tests {
    use super::*;

    const TEXT: &str = "name = \"x\"\n[tdc]\nbits = 3\n[[gates]]\nbit = 0\n[[gates]]\nbit = 2\n";

    #[test]
    fn keys_are_found_by_table_and_entry() {
        let c = Check {
            source: "p.toml",
            text: TEXT,
        };
        assert_eq!(c.err("tdc.bits", "x").line, Some(3));
        assert_eq!(c.err("gates[1].bit", "x").line, Some(7));
        assert_eq!(c.err("gates[0].bit", "x").line, Some(5));
        assert_eq!(c.err("gates[1]", "x").line, Some(6));
        assert_eq!(c.err("bit", "x").line, Some(5));
        assert_eq!(c.err("gates[2].bit", "x").line, None);
        let e = c.err("gates[1].bit", "must be 0 or 1");
        assert_eq!(
            e.to_string(),
            "p.toml: line 7, column 1 (byte 54): key 'gates[1].bit': must be 0 or 1"
        );
    }
}
