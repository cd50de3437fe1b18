//! Metadata from file names: a pattern of literal text and `{field}` placeholders, matched against the
//! whole file stem (the name without folder and extension).

use crate::spectrum::MetaValue;

/// A file-name pattern such as `cell{cell}_c{cycle}_soc{soc}`.
///
/// Each placeholder takes one or more characters; literal text must match exactly (case-sensitive).
/// Values that read as numbers become numbers.
///
/// ```
/// use eis_core::import::NamePattern;
/// use eis_core::spectrum::MetaValue;
/// let p = NamePattern::parse("cell{cell}_c{cycle}_soc{soc}").unwrap();
/// let m = p.matches("cellA3_c150_soc50").unwrap();
/// assert_eq!(m[0], ("cell".to_owned(), MetaValue::Text("A3".into())));
/// assert_eq!(m[1], ("cycle".to_owned(), MetaValue::Number(150.0)));
/// assert!(p.matches("other").is_none());
/// ```
#[derive(Debug, Clone, PartialEq)]
pub struct NamePattern {
    text: String,
    parts: Vec<Part>,
}

#[derive(Debug, Clone, PartialEq)]
enum Part {
    Literal(String),
    Field(String),
}

impl NamePattern {
    /// Parses a pattern.
    ///
    /// # Errors
    ///
    /// A message for an unclosed `{`, a stray `}`, an empty or repeated field name, two placeholders
    /// without literal text between them (which could split the name anywhere), or no placeholder.
    pub fn parse(text: &str) -> Result<NamePattern, String> {
        let mut parts = Vec::new();
        let mut rest = text;
        while !rest.is_empty() {
            if let Some(after) = rest.strip_prefix('{') {
                let end = after
                    .find('}')
                    .ok_or_else(|| format!("unclosed `{{` in name pattern `{text}`"))?;
                let name = after[..end].trim();
                if name.is_empty() || name.contains('{') {
                    return Err(format!(
                        "empty or malformed field name in name pattern `{text}`"
                    ));
                }
                if matches!(parts.last(), Some(Part::Field(_))) {
                    return Err(format!(
                        "two fields without text between them in name pattern `{text}`"
                    ));
                }
                if parts
                    .iter()
                    .any(|p| matches!(p, Part::Field(n) if n == name))
                {
                    return Err(format!(
                        "field `{name}` appears twice in name pattern `{text}`"
                    ));
                }
                parts.push(Part::Field(name.to_owned()));
                rest = &after[end + 1..];
            } else {
                let end = rest.find(['{', '}']).unwrap_or(rest.len());
                if rest[end..].starts_with('}') {
                    return Err(format!("`}}` without `{{` in name pattern `{text}`"));
                }
                parts.push(Part::Literal(rest[..end].to_owned()));
                rest = &rest[end..];
            }
        }
        if !parts.iter().any(|p| matches!(p, Part::Field(_))) {
            return Err(format!("name pattern `{text}` has no {{field}}"));
        }
        Ok(NamePattern {
            text: text.to_owned(),
            parts,
        })
    }

    /// The pattern as written.
    pub fn as_str(&self) -> &str {
        &self.text
    }

    /// The fields, in pattern order, if `name` matches the whole pattern.
    pub fn matches(&self, name: &str) -> Option<Vec<(String, MetaValue)>> {
        let mut out = Vec::new();
        match_from(&self.parts, name, &mut out).then(|| {
            out.into_iter()
                .map(|(k, v)| (k, MetaValue::parse(&v)))
                .collect()
        })
    }
}

fn match_from(parts: &[Part], s: &str, out: &mut Vec<(String, String)>) -> bool {
    match parts.first() {
        None => s.is_empty(),
        Some(Part::Literal(l)) => s
            .strip_prefix(l.as_str())
            .is_some_and(|rest| match_from(&parts[1..], rest, out)),
        Some(Part::Field(_)) if s.is_empty() => false,
        Some(Part::Field(name)) => {
            // Shortest value first, so `c{cycle}_soc{soc}` stops at the first `_soc`.
            for (i, _) in s.char_indices().skip(1).chain([(s.len(), ' ')]) {
                out.push((name.clone(), s[..i].to_owned()));
                if match_from(&parts[1..], &s[i..], out) {
                    return true;
                }
                out.pop();
            }
            false
        }
    }
}

impl std::str::FromStr for NamePattern {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        NamePattern::parse(s)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn matches_and_rejects() {
        let p = NamePattern::parse("{cell}_T{temp}").unwrap();
        let m = p.matches("B_12_T-10").unwrap();
        assert_eq!(m[0].1, MetaValue::Text("B_12".into()));
        assert_eq!(m[1].1, MetaValue::Number(-10.0));
        assert!(
            p.matches("B_T").is_none(),
            "fields take one character or more"
        );
        for bad in ["{a", "a}", "{}", "{a}{b}", "plain", "{a}_{a}"] {
            assert!(NamePattern::parse(bad).is_err(), "{bad}");
        }
    }
}
