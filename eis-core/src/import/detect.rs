//! Text decoding and table detection: encoding, delimiter, decimal mark, header and where data start.
//!
//! Each line is decoded on its own: UTF-8 when it is valid UTF-8 (a byte-order mark on the first line
//! is dropped), Windows-1252 otherwise (a superset of Latin-1 for printable text, so `°` and `µ` from
//! either come through). Decoding never fails.

/// Decodes one line (without its `\n`), dropping a trailing `\r`.
pub(crate) fn decode_line(bytes: &[u8], first: bool) -> String {
    let mut b = bytes;
    if first {
        b = b.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(b);
    }
    if let Some(rest) = b.strip_suffix(b"\r") {
        b = rest;
    }
    match std::str::from_utf8(b) {
        Ok(s) => s.to_owned(),
        Err(_) => b.iter().map(|&c| windows_1252(c)).collect(),
    }
}

/// The character of a Windows-1252 byte; bytes 0x80–0x9F that the code page leaves undefined map to
/// the Latin-1 control characters of the same value.
fn windows_1252(b: u8) -> char {
    const HIGH: [char; 32] = [
        '\u{20AC}', '\u{81}', '\u{201A}', '\u{192}', '\u{201E}', '\u{2026}', '\u{2020}',
        '\u{2021}', '\u{2C6}', '\u{2030}', '\u{160}', '\u{2039}', '\u{152}', '\u{8D}', '\u{17D}',
        '\u{8F}', '\u{90}', '\u{2018}', '\u{2019}', '\u{201C}', '\u{201D}', '\u{2022}', '\u{2013}',
        '\u{2014}', '\u{2DC}', '\u{2122}', '\u{161}', '\u{203A}', '\u{153}', '\u{9D}', '\u{17E}',
        '\u{178}',
    ];
    match b {
        0x80..=0x9F => HIGH[(b - 0x80) as usize],
        _ => b as char,
    }
}

/// How fields are separated.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Delimiter {
    /// A tab.
    Tab,
    /// A semicolon.
    Semicolon,
    /// A comma.
    Comma,
    /// One or more spaces or tabs.
    Whitespace,
}

impl Delimiter {
    const ALL: [Delimiter; 4] = [
        Delimiter::Tab,
        Delimiter::Semicolon,
        Delimiter::Comma,
        Delimiter::Whitespace,
    ];
}

/// Whether a line is a comment: starts with `#`, `%`, `!` or `//` after leading blanks.
pub(crate) fn is_comment(line: &str) -> bool {
    let t = line.trim_start();
    t.starts_with('#') || t.starts_with('%') || t.starts_with('!') || t.starts_with("//")
}

/// The line without its comment marker.
fn strip_comment(line: &str) -> &str {
    let t = line.trim_start();
    t.strip_prefix("//")
        .or_else(|| t.strip_prefix(['#', '%', '!']))
        .unwrap_or(t)
}

/// Splits a line into fields, honouring double quotes (a delimiter inside quotes is text) and removing
/// the quotes and surrounding blanks. With a one-character delimiter, a single trailing empty field
/// (a line ending in the delimiter) is dropped.
pub(crate) fn split(line: &str, d: Delimiter, out: &mut Vec<String>) {
    out.clear();
    if d == Delimiter::Whitespace {
        split_whitespace(line, out);
        return;
    }
    let sep = match d {
        Delimiter::Tab => '\t',
        Delimiter::Semicolon => ';',
        Delimiter::Comma => ',',
        Delimiter::Whitespace => unreachable!("handled above"),
    };
    let mut q = Quoting::default();
    for c in line.chars() {
        if q.take(c, |cur| cur.trim().is_empty()) {
            continue;
        }
        if c == sep {
            out.push(q.cur.trim().to_owned());
            q.cur.clear();
        } else {
            q.cur.push(c);
        }
    }
    let last = q.cur.trim();
    if !last.is_empty() || out.is_empty() {
        out.push(last.to_owned());
    }
}

/// The field being read and whether it is inside quotes.
#[derive(Default)]
struct Quoting {
    cur: String,
    quoted: bool,
}

impl Quoting {
    /// Takes `c` when quoting decides it: inside quotes (text, or the closing quote), or an opening
    /// quote where `at_start` says the field has not begun, so `Z"` (a double prime) stays text.
    /// False for a character the delimiter rules decide.
    fn take(&mut self, c: char, at_start: fn(&str) -> bool) -> bool {
        if self.quoted {
            if c == '"' {
                self.quoted = false;
            } else {
                self.cur.push(c);
            }
            true
        } else if c == '"' && at_start(&self.cur) {
            self.quoted = true;
            true
        } else {
            false
        }
    }
}

fn split_whitespace(line: &str, out: &mut Vec<String>) {
    let mut q = Quoting::default();
    for c in line.chars() {
        if q.take(c, str::is_empty) {
            continue;
        }
        if c == ' ' || c == '\t' {
            if !q.cur.is_empty() {
                out.push(std::mem::take(&mut q.cur));
            }
        } else {
            q.cur.push(c);
        }
    }
    if !q.cur.is_empty() {
        out.push(q.cur);
    }
}

/// Splits a header line of a whitespace-delimited table on runs of two or more blanks or on tabs, so
/// that `Z' (Ohm)` stays one field.
fn split_wide(line: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut cur = String::new();
    let mut spaces = 0;
    for c in line.chars() {
        if c == '\t' || (c == ' ' && spaces >= 1) {
            if !cur.trim().is_empty() {
                out.push(cur.trim().to_owned());
            }
            cur.clear();
            spaces = 0;
        } else if c == ' ' {
            spaces += 1;
            cur.push(c);
        } else {
            spaces = 0;
            cur.push(c);
        }
    }
    if !cur.trim().is_empty() {
        out.push(cur.trim().to_owned());
    }
    out.into_iter()
        .map(|s| s.trim_matches('"').to_owned())
        .collect()
}

/// Reads a cell as a number with the given decimal mark. NaN and infinities read as numbers (the
/// reader reports them as such later); an empty cell does not.
pub(crate) fn parse_number(cell: &str, decimal_comma: bool) -> Option<f64> {
    let t = cell.trim();
    if t.is_empty() || t.len() > 64 {
        return None;
    }
    if decimal_comma && t.contains(',') {
        if t.matches(',').count() > 1 || t.contains('.') {
            return None;
        }
        t.replace(',', ".").parse().ok()
    } else {
        t.parse().ok()
    }
}

/// The table structure found in the first lines of a file.
#[derive(Debug, Clone)]
pub(crate) struct Layout {
    pub delimiter: Delimiter,
    pub decimal_comma: bool,
    /// Fields per data line (the most common count).
    pub fields: usize,
    /// Index into the sample of the first line read as data: the line after the header (and its
    /// units line), so that bad rows above the first clean one are read, and reported, as data.
    pub data_start: usize,
    /// Index into the sample of the header line (the names), if a header was found.
    pub header_index: Option<usize>,
    /// Header words, one per field, if a header was found (a units line below the names is merged in
    /// as `name (unit)`).
    pub header: Option<Vec<String>>,
    /// The header line or lines as written, to recognise them when repeated between spectra.
    pub header_text: Vec<String>,
    /// Indices into the sample of lines above a headerless table that look like damaged data rows
    /// (the data's field count, two or more numbers): not read, but named in a warning.
    pub skipped: Vec<usize>,
}

fn numeric_fields(fields: &[String], decimal_comma: bool) -> usize {
    fields
        .iter()
        .filter(|f| parse_number(f, decimal_comma).is_some())
        .count()
}

/// Finds the layout from a sample of non-blank lines. Returns `None` if no line holds three or more
/// numbers under any delimiter.
pub(crate) fn detect(sample: &[String]) -> Option<Layout> {
    let mut best: Option<(usize, usize, usize, Delimiter, bool)> = None; // (score, numbers, pref, d, comma)
    let mut fields = Vec::new();
    // A candidate whose separator appears in no line splits nothing and cannot win, and without a
    // comma anywhere the decimal-comma reading scores like the point reading and loses the tie: both
    // are skipped without changing the result.
    let data = || sample.iter().filter(|l| !is_comment(l));
    let has = |chars: &[char]| data().any(|l| l.contains(chars));
    let (tab, semicolon, comma_seen, blank) =
        (has(&['\t']), has(&[';']), has(&[',']), has(&[' ', '\t']));
    for (pref, d) in Delimiter::ALL.into_iter().enumerate() {
        let present = match d {
            Delimiter::Tab => tab,
            Delimiter::Semicolon => semicolon,
            Delimiter::Comma => comma_seen,
            Delimiter::Whitespace => blank,
        };
        if !present {
            continue;
        }
        for comma in [false, true] {
            if comma && (d == Delimiter::Comma || !comma_seen) {
                continue;
            }
            // Data lines: three or more numeric fields; score by the most common field count.
            let mut counts: Vec<(usize, usize, usize)> = Vec::new(); // (fields, lines, numbers)
            for line in sample.iter().filter(|l| !is_comment(l)) {
                split(line, d, &mut fields);
                let n = numeric_fields(&fields, comma);
                if n >= 3 {
                    match counts.iter_mut().find(|c| c.0 == fields.len()) {
                        Some(c) => {
                            c.1 += 1;
                            c.2 += n;
                        }
                        None => counts.push((fields.len(), 1, n)),
                    }
                }
            }
            let Some(&(_, lines, numbers)) = counts.iter().max_by_key(|c| (c.1, c.2)) else {
                continue;
            };
            // Prefer more data lines, then more numbers, then the earlier delimiter, then a point.
            let key = (lines, numbers, usize::MAX - (2 * pref + comma as usize));
            if best.is_none_or(|b| key > (b.0, b.1, b.2)) {
                best = Some((key.0, key.1, key.2, d, comma));
            }
        }
    }
    let (_, _, _, delimiter, decimal_comma) = best?;
    // The field count of data lines and the first line of the first run of data lines.
    let mut per_line: Vec<Option<usize>> = Vec::with_capacity(sample.len());
    for line in sample {
        if is_comment(line) {
            per_line.push(None);
            continue;
        }
        split(line, delimiter, &mut fields);
        let n = numeric_fields(&fields, decimal_comma);
        per_line.push((n >= 3).then_some(fields.len()));
    }
    let mut tally: Vec<(usize, usize)> = Vec::new();
    for n in per_line.iter().flatten() {
        match tally.iter_mut().find(|t| t.0 == *n) {
            Some(t) => t.1 += 1,
            None => tally.push((*n, 1)),
        }
    }
    let n_fields = tally.iter().max_by_key(|t| t.1)?.0;
    let first_clean = per_line.iter().position(|p| *p == Some(n_fields))?;
    let found = find_header(sample, first_clean, delimiter, n_fields, decimal_comma);
    Some(Layout {
        delimiter,
        decimal_comma,
        fields: n_fields,
        data_start: found.data_start,
        header_index: found.header_index,
        header: found.header,
        header_text: found.header_text,
        skipped: found.skipped,
    })
}

/// The cells of a candidate header or units line: split like the data (a whitespace table's header
/// on runs of two blanks when that gives the data's field count), comment marker removed, trailing
/// empty cells dropped.
fn header_cells(line: &str, d: Delimiter, n: usize) -> Vec<String> {
    let text = strip_comment(line);
    let mut f = Vec::new();
    split(text, d, &mut f);
    if f.len() != n && d == Delimiter::Whitespace {
        f = split_wide(text);
    }
    while f.last().is_some_and(|s| s.is_empty()) {
        f.pop();
    }
    f
}

/// Whether cells name columns by their own words: no number among them, at most one per data field,
/// and two or more words the reader knows as column names making at least half of the non-empty
/// cells. A comment line must consist of such words only.
fn is_named_header(cells: &[String], n: usize, comma: bool, comment: bool) -> bool {
    if cells.len() < 2 || cells.len() > n || numeric_fields(cells, comma) > 0 {
        return false;
    }
    let filled = cells.iter().filter(|c| !c.is_empty()).count();
    let known = cells
        .iter()
        .filter(|c| super::columns::is_role_word(c))
        .count();
    known >= 2
        && if comment {
            known == filled
        } else {
            2 * known >= filled
        }
}

/// Whether cells are a line of units: at least one, and every non-empty cell a unit the reader knows
/// (empty cells are columns without a unit).
fn is_units_line(cells: &[String]) -> bool {
    cells.iter().any(|c| !c.is_empty())
        && cells
            .iter()
            .all(|c| c.is_empty() || super::columns::is_unit_word(c))
}

/// A header of words the reader does not know (`A,B,C`): accepted only directly above the data, not
/// in a comment, one non-empty, non-numeric cell per field.
fn is_plain_header(line: &str, cells: &[String], n: usize, comma: bool) -> bool {
    !is_comment(line)
        && cells.len() == n
        && cells
            .iter()
            .all(|c| !c.is_empty() && parse_number(c, comma).is_none())
}

struct Found {
    data_start: usize,
    header_index: Option<usize>,
    header: Option<Vec<String>>,
    header_text: Vec<String>,
    skipped: Vec<usize>,
}

/// Finds the header above the first clean data line `first_clean`, looking upwards past comments and
/// bad data rows (rows with a number in them) for a line of column names, with or without a line of
/// units under it. Without a header, rows directly above `first_clean` with the data's field count
/// and two or more numbers may be damaged data rows or a preamble: they are not read but named.
fn find_header(
    sample: &[String],
    first_clean: usize,
    d: Delimiter,
    n: usize,
    comma: bool,
) -> Found {
    let cells_of = |i: usize| {
        sample
            .get(i)
            .map(|l| header_cells(l, d, n))
            .unwrap_or_default()
    };
    let named = |i: usize| {
        sample
            .get(i)
            .is_some_and(|l| is_named_header(&cells_of(i), n, comma, is_comment(l)))
    };
    let plain = |i: usize| {
        sample
            .get(i)
            .is_some_and(|l| is_plain_header(l, &cells_of(i), n, comma))
    };
    let with_header = |names: usize, units: Option<usize>| {
        let upper = cells_of(names);
        let header = match units {
            None => {
                let mut h = upper;
                h.resize(h.len().max(n), String::new());
                h
            }
            Some(u) => {
                let lower = cells_of(u);
                (0..upper.len().max(n))
                    .map(|k| {
                        let name = upper.get(k).map(String::as_str).unwrap_or("");
                        let unit = lower
                            .get(k)
                            .map(|u| {
                                u.trim_start_matches(['(', '['])
                                    .trim_end_matches([')', ']'])
                            })
                            .unwrap_or("");
                        if unit.is_empty() {
                            name.to_owned()
                        } else {
                            format!("{name} ({unit})")
                        }
                    })
                    .collect()
            }
        };
        let last = units.unwrap_or(names);
        Found {
            data_start: last + 1,
            header_index: Some(names),
            header: Some(header),
            header_text: (names..=last)
                .filter_map(|i| sample.get(i).map(|l| l.trim().to_owned()))
                .collect(),
            skipped: Vec::new(),
        }
    };
    let mut fields = Vec::new();
    // Top of the rows that are data by the strict rule for a headerless table.
    let mut top = first_clean;
    let mut strict = true;
    let mut i = first_clean;
    while i > 0 {
        i -= 1;
        let Some(line) = sample.get(i) else { break };
        let cells = cells_of(i);
        if i > 0 && is_units_line(&cells) && (named(i - 1) || plain(i - 1)) {
            return with_header(i - 1, Some(i));
        }
        if named(i) {
            return with_header(i, None);
        }
        if is_comment(line) {
            continue;
        }
        split(line, d, &mut fields);
        let numbers = numeric_fields(&fields, comma);
        if numbers == 0 {
            // Text: a header of unknown words directly above the data, or the end of the table.
            if i + 1 == top && plain(i) {
                return with_header(i, None);
            }
            break;
        }
        if strict && fields.len() == n && numbers >= 2 {
            top = i;
        } else {
            strict = false;
        }
    }
    let skipped = (top..first_clean)
        .filter(|&i| sample.get(i).is_some_and(|l| !is_comment(l)))
        .collect();
    Found {
        data_start: first_clean,
        header_index: None,
        header: None,
        header_text: Vec::new(),
        skipped,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lines(text: &str) -> Vec<String> {
        text.lines()
            .filter(|l| !l.trim().is_empty())
            .map(String::from)
            .collect()
    }

    #[test]
    fn decodes_utf8_bom_crlf_and_windows_1252() {
        assert_eq!(decode_line(b"\xEF\xBB\xBFfreq\r", true), "freq");
        assert_eq!(decode_line("Z (\u{3a9})".as_bytes(), false), "Z (\u{3a9})");
        // Latin-1 degree and micro signs, and the Windows-1252 en dash (0x96).
        assert_eq!(
            decode_line(b"phase (\xB0) \xB5s \x96", false),
            "phase (\u{b0}) \u{b5}s \u{2013}"
        );
    }

    #[test]
    fn splits_quotes_and_trailing_delimiter() {
        let mut f = Vec::new();
        split("\"a;b\"; 2 ;3;", Delimiter::Semicolon, &mut f);
        assert_eq!(f, ["a;b", "2", "3"]);
        split("  1  2\t3 ", Delimiter::Whitespace, &mut f);
        assert_eq!(f, ["1", "2", "3"]);
        assert_eq!(
            split_wide("Freq (Hz)   Z' (Ohm)  Z'' (Ohm)"),
            ["Freq (Hz)", "Z' (Ohm)", "Z'' (Ohm)"]
        );
    }

    #[test]
    fn numbers_with_either_decimal_mark() {
        assert_eq!(parse_number("1,5", true), Some(1.5));
        assert_eq!(parse_number("1,5", false), None);
        assert_eq!(parse_number("1.5", true), Some(1.5));
        assert_eq!(parse_number("1,5,6", true), None);
        assert_eq!(parse_number("-2.5e3", false), Some(-2500.0));
        assert!(parse_number("NaN", false).unwrap().is_nan());
        assert_eq!(parse_number("", false), None);
    }

    /// (sample text, delimiter, decimal comma, fields, data start, header present)
    #[test]
    fn detects_layouts() {
        let cases: &[(&str, Delimiter, bool, usize, usize, bool)] = &[
            (
                "f,re,im\n1,2,3\n4,5,6\n",
                Delimiter::Comma,
                false,
                3,
                1,
                true,
            ),
            (
                "f;re;im\n1,5;2,5;-3,5\n4;5;6\n",
                Delimiter::Semicolon,
                true,
                3,
                1,
                true,
            ),
            ("f\tre\tim\n1.5\t2\t3\n", Delimiter::Tab, false, 3, 1, true),
            (
                "1,5 2,5 3,5\n4,5 5 6\n",
                Delimiter::Whitespace,
                true,
                3,
                0,
                false,
            ),
            (
                "Instrument: X\nDate: 1.2.2024\nf re im\n1 2 3\n4 5 6\n",
                Delimiter::Whitespace,
                false,
                3,
                3,
                true,
            ),
            (
                "# comment\nfreq,re,im,cycle\n1,2,3,1\n",
                Delimiter::Comma,
                false,
                4,
                2,
                true,
            ),
            (
                "f,re,im\nHz,Ohm,Ohm\n1,2,3\n",
                Delimiter::Comma,
                false,
                3,
                2,
                true,
            ),
        ];
        for &(text, d, comma, n, start, header) in cases {
            let l = detect(&lines(text)).unwrap_or_else(|| panic!("{text:?}"));
            assert_eq!(
                (
                    l.delimiter,
                    l.decimal_comma,
                    l.fields,
                    l.data_start,
                    l.header.is_some()
                ),
                (d, comma, n, start, header),
                "{text:?}"
            );
        }
        let l = detect(&lines("f,re,im\nHz,Ohm,Ohm\n1,2,3\n")).unwrap();
        assert_eq!(l.header.unwrap(), ["f (Hz)", "re (Ohm)", "im (Ohm)"]);
        assert!(detect(&lines("just text\nmore text\n1,2\n")).is_none());
    }
}
