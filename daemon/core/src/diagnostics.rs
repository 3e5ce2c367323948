//! Where a problem in a TOML file is, for messages a person can act on: the 1-based line and column of a
//! byte offset, and the dotted field at it with every array of tables numbered (`frame[2].poll_ms`,
//! `increment[0].readings`). Shared by the configuration checker and the file reductions, so both name a
//! place the same way. It must not parse values; it only locates.

/// 1-based line and column (in characters) of byte `offset` of `source`; an offset inside a character or
/// past the end is taken back to the nearest boundary.
pub fn line_column(source: &str, offset: usize) -> (usize, usize) {
    let before = &source[..floor_char_boundary(source, offset)];
    let line = before.matches('\n').count() + 1;
    let column = before.rsplit('\n').next().map_or(0, |l| l.chars().count()) + 1;
    (line, column)
}

fn floor_char_boundary(source: &str, offset: usize) -> usize {
    let mut i = offset.min(source.len());
    while !source.is_char_boundary(i) {
        i -= 1;
    }
    i
}

/// `line L, column C: ` for a place, nothing without one (for messages that start with the place).
pub(crate) fn at_prefix(at: Option<(usize, usize)>) -> String {
    at.map(|(l, c)| format!("line {l}, column {c}: ")).unwrap_or_default()
}

/// The dotted field at byte `offset`: the table the offset lies in (each `[[array]]` numbered from 0 in
/// the order written, nested arrays counted within their parent) and the key on its line. `file` when the
/// offset lies before any table and on no key.
pub fn field_at(source: &str, offset: usize) -> String {
    let offset = floor_char_boundary(source, offset);
    let line_start = source[..offset].rfind('\n').map_or(0, |i| i + 1);
    let line_end = source[offset..].find('\n').map_or(source.len(), |i| offset + i);
    // Array-of-tables names seen so far with the index of the current element.
    let mut arrays: Vec<(String, usize)> = Vec::new();
    let mut table = String::new();
    for line in source[..line_end].lines() {
        let t = line.trim();
        let Some(rest) = t.strip_prefix('[') else { continue };
        let is_array = rest.starts_with('[');
        let name: String = rest
            .trim_start_matches('[')
            .split(']')
            .next()
            .unwrap_or("")
            .split('.')
            .map(str::trim)
            .collect::<Vec<_>>()
            .join(".");
        if is_array {
            // A new element forgets the counts of arrays nested in the previous one.
            arrays.retain(|(n, _)| !n.starts_with(&format!("{name}.")));
            match arrays.iter_mut().find(|(n, _)| *n == name) {
                Some((_, i)) => *i += 1,
                None => arrays.push((name.clone(), 0)),
            }
        }
        table = numbered(&name, &arrays);
    }
    let line = source[line_start..line_end].trim();
    let key = if line.starts_with('[') || !line.contains('=') {
        ""
    } else {
        line.split('=').next().unwrap_or("").trim().trim_matches('"')
    };
    match (table.is_empty(), key.is_empty()) {
        (true, true) => "file".into(),
        (true, false) => key.to_string(),
        (false, true) => table,
        (false, false) => format!("{table}.{key}"),
    }
}

/// `a.b.c` with the current index after every prefix that is an array of tables.
fn numbered(name: &str, arrays: &[(String, usize)]) -> String {
    let mut out = String::new();
    let mut prefix = String::new();
    for part in name.split('.') {
        if !prefix.is_empty() {
            prefix.push('.');
            out.push('.');
        }
        prefix.push_str(part);
        out.push_str(part);
        if let Some((_, i)) = arrays.iter().find(|(n, _)| *n == prefix) {
            out.push_str(&format!("[{i}]"));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    const FILE: &str = "title = \"x\"\n[store]\npath = \"a\"\n[[frame]]\nid = \"F1\"\n[[frame]]\nid = \"F2\"\npoll_ms = \"x\"\n[frame.deflection]\nloading = []\n[[frame.channel]]\nkind = 1\n[[frame]]\n[[frame.channel]]\nkind = 2\n";

    fn at(text: &str) -> String {
        field_at(FILE, FILE.find(text).unwrap())
    }

    #[test]
    fn every_array_of_tables_is_numbered_and_nested_ones_count_within_their_parent() {
        assert_eq!(at("title"), "title");
        assert_eq!(at("path"), "store.path");
        assert_eq!(at("\"F1\""), "frame[0].id");
        assert_eq!(at("poll_ms"), "frame[1].poll_ms");
        assert_eq!(at("loading"), "frame[1].deflection.loading");
        assert_eq!(at("kind = 1"), "frame[1].channel[0].kind");
        assert_eq!(at("kind = 2"), "frame[2].channel[0].kind");
    }

    #[test]
    fn line_and_column_count_characters_and_survive_offsets_inside_a_character() {
        let text = "a = 1\nσ = 2\n";
        assert_eq!(line_column(text, text.find('=').unwrap()), (1, 3));
        let second = text.rfind('=').unwrap();
        assert_eq!(line_column(text, second), (2, 3));
        // One byte into the two-byte σ: taken back to its start.
        assert_eq!(line_column(text, 7), (2, 1));
        assert_eq!(line_column(text, 10_000), (3, 1));
        assert_eq!(at_prefix(Some((2, 3))), "line 2, column 3: ");
        assert_eq!(at_prefix(None), "");
    }
}
