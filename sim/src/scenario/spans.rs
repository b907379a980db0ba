//! Locating scenario keys in the file text, so every message can name a line.

use toml::Spanned;
use toml::de::{DeTable, DeValue};

/// Key paths of a TOML document with the byte ranges of their keys and values.
#[derive(Debug, Default)]
pub struct SpanIndex {
    entries: Vec<(String, std::ops::Range<usize>, std::ops::Range<usize>)>,
    line_starts: Vec<usize>,
}

impl SpanIndex {
    /// Indexes `text`; a text that does not parse gives an index with lines only.
    pub fn new(text: &str) -> Self {
        let mut line_starts = vec![0];
        line_starts.extend(text.match_indices('\n').map(|(i, _)| i + 1));
        let mut idx = SpanIndex { entries: Vec::new(), line_starts };
        if let Ok(doc) = DeTable::parse(text) {
            idx.walk_table("", doc.get_ref());
        }
        idx
    }

    fn walk_table(&mut self, path: &str, table: &DeTable<'_>) {
        for (k, v) in table {
            let p = super::spec::join(path, k.get_ref());
            self.entries.push((p.clone(), k.span(), v.span()));
            self.walk_value(&p, v);
        }
    }

    fn walk_value(&mut self, path: &str, v: &Spanned<DeValue<'_>>) {
        match v.get_ref() {
            DeValue::Table(t) => self.walk_table(path, t),
            DeValue::Array(a) => {
                for (i, item) in a.iter().enumerate() {
                    let p = format!("{path}[{i}]");
                    self.entries.push((p.clone(), item.span(), item.span()));
                    self.walk_value(&p, item);
                }
            }
            _ => {}
        }
    }

    /// 1-based line of a byte offset.
    pub fn line_of(&self, offset: usize) -> usize {
        match self.line_starts.binary_search(&offset) {
            Ok(i) => i + 1,
            Err(i) => i,
        }
    }

    /// 1-based line where the key `path` is written, or its nearest written ancestor.
    pub fn line_of_path(&self, path: &str) -> Option<usize> {
        let mut p = path.to_string();
        loop {
            if let Some((_, k, _)) = self.entries.iter().find(|(q, _, _)| *q == p) {
                return Some(self.line_of(k.start));
            }
            let cut = p.rfind(['.', '['])?;
            p.truncate(cut);
        }
    }

    /// The deepest key path whose key or value contains the byte range `span`.
    pub fn path_at(&self, span: &std::ops::Range<usize>) -> Option<String> {
        self.entries
            .iter()
            .filter(|(_, k, v)| {
                (k.start <= span.start && span.end <= k.end.max(k.start + 1))
                    || (v.start <= span.start && span.end <= v.end.max(v.start + 1))
            })
            .max_by_key(|(p, _, _)| p.matches(['.', '[']).count())
            .map(|(p, _, _)| p.clone())
    }

    /// The text of the value at `path`, as written, when it is a scalar.
    pub fn raw_value<'a>(&self, text: &'a str, path: &str) -> Option<&'a str> {
        self.entries.iter().find(|(q, _, _)| q == path).and_then(|(_, _, v)| text.get(v.clone()))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_lines_of_nested_keys() {
        let text = "[run]\nseed = 3\n\n[[particle]]\nname = \"a\"\n[[particle]]\nname = \"b\"\nradius_nm = 5\n";
        let idx = SpanIndex::new(text);
        assert_eq!(idx.line_of_path("run.seed"), Some(2));
        assert_eq!(idx.line_of_path("particle[1].radius_nm"), Some(8));
        // A missing key falls back to its section.
        assert_eq!(idx.line_of_path("run.end_time_h"), Some(1));
        assert_eq!(idx.raw_value(text, "particle[1].radius_nm"), Some("5"));
    }
}
