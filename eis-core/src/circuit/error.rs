//! Errors in circuit text, carried as byte spans and shown with the text and a caret run under the fault.

use super::ast::Span;
use std::fmt;

/// What is wrong with a circuit text. Each variant's doc gives an input that triggers it.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum CircuitErrorKind {
    /// The text holds no circuit: `""`, `"# only a comment"`.
    Empty,
    /// A name that starts with no known kind symbol: `R0 + X1`.
    UnknownKind(String),
    /// A character that cannot start anything: `R0 * R1`.
    UnexpectedChar(char),
    /// An operator with nothing on one side: `R0 +`, `| R1`.
    DanglingOperator(char),
    /// Two operators in a row: `R0 + | R1`.
    DoubledOperator(char, char),
    /// `(` without its `)`: `(R0 + R1`.
    UnclosedParen,
    /// `)` without its `(`: `R0 + R1)`.
    UnmatchedCloseParen,
    /// Parentheses with nothing inside: `R0 + ()`.
    EmptyGroup,
    /// Parentheses nested deeper than the limit ([`crate::circuit::MAX_NESTING`], 64): 65 `(` in a
    /// row before `R0`. Carries the limit.
    TooDeep(usize),
    /// Two nodes side by side without an operator: `R0 R1`.
    MissingOperator,
    /// Two elements with one name: `R1 + R1`.
    DuplicateName(String),
    /// A number that does not parse: `R0{1.2.3}`.
    BadNumber(String),
    /// An annotation names a parameter the element lacks: `Qdl{m=1}`.
    UnknownParam {
        /// The element.
        element: String,
        /// The parameter asked for.
        param: String,
        /// The parameters it has.
        known: Vec<&'static str>,
    },
    /// A multi-parameter element's annotation starts without a name: `Qdl{1u}`.
    MissingParamName {
        /// The parameters it has.
        known: Vec<&'static str>,
    },
    /// A property given twice: `R0{1, 2}`.
    Repeated(&'static str),
    /// Lower bound not below the upper: `R0{10..1}`.
    InvertedBounds {
        /// Lower bound.
        lower: f64,
        /// Upper bound.
        upper: f64,
    },
    /// Initial value outside its bounds: `R0{50 1..10}`.
    InitialOutsideBounds {
        /// The value.
        value: f64,
        /// Lower bound (−∞ shown when absent).
        lower: f64,
        /// Upper bound.
        upper: f64,
    },
    /// A value the parameter can never take: `R0{-5}`, `Q1{n=1.5}`.
    OutsideDomain {
        /// The parameter.
        param: String,
        /// The value.
        value: f64,
        /// What is allowed, in words.
        allowed: String,
    },
    /// An unclosed annotation: `R0{50`.
    UnclosedAnnotation,
    /// Braces or a parameter line with nothing in them: `R0{}`.
    EmptyAnnotation,
    /// A word that is not a number, a range or `fixed` inside an annotation: `R0{big}`.
    UnknownAnnotation(String),
    /// A parameter line or option naming no parameter of the circuit: `Rx = 5` in a file.
    UnknownParamName {
        /// The name.
        name: String,
        /// The closest existing name, if any is close.
        suggestion: Option<String>,
    },
    /// A role line that is malformed or names no resistor inside an arc: `role Rct = catalyst`.
    BadRole(String),
}

impl fmt::Display for CircuitErrorKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        use CircuitErrorKind::*;
        match self {
            Empty => write!(f, "the circuit is empty"),
            UnknownKind(name) => write!(
                f,
                "unknown element kind in `{name}`; an element starts with one of {}",
                super::kind_list()
            ),
            UnexpectedChar(c) => write!(
                f,
                "unexpected `{c}`; expected an element, `(`, `+` (series) or `|` (parallel)"
            ),
            DanglingOperator(op) => {
                write!(
                    f,
                    "`{op}` needs a circuit on both sides; expected an element or `(`"
                )
            }
            DoubledOperator(a, b) => write!(
                f,
                "`{b}` follows `{a}` directly; expected an element or `(` between them"
            ),
            UnclosedParen => write!(f, "this `(` is never closed; expected `)`"),
            UnmatchedCloseParen => write!(f, "this `)` has no matching `(`"),
            EmptyGroup => write!(f, "empty parentheses; expected a circuit inside"),
            TooDeep(limit) => write!(
                f,
                "nesting deeper than {limit} levels; expected at most {limit} `(` open at once"
            ),
            MissingOperator => {
                write!(
                    f,
                    "expected `+` (series) or `|` (parallel) between these parts"
                )
            }
            DuplicateName(name) => {
                write!(f, "the name `{name}` is used twice; names must be unique")
            }
            BadNumber(text) => write!(
                f,
                "`{text}` is not a number; expected e.g. `50`, `4.7u`, `2k`, `1e-3`"
            ),
            UnknownParam {
                element,
                param,
                known,
            } => write!(
                f,
                "`{element}` has no parameter `{param}`; expected one of {}",
                known.join(", ")
            ),
            MissingParamName { known } => write!(
                f,
                "this element has several parameters; expected `name=` first, one of {}",
                known.join(", ")
            ),
            Repeated(what) => write!(f, "the {what} is given twice"),
            InvertedBounds { lower, upper } => write!(
                f,
                "lower bound {} is not below upper bound {}",
                crate::number::format_si(*lower),
                crate::number::format_si(*upper)
            ),
            InitialOutsideBounds {
                value,
                lower,
                upper,
            } => write!(
                f,
                "initial value {} lies outside its bounds {}..{}",
                crate::number::format_si(*value),
                crate::number::format_si(*lower),
                crate::number::format_si(*upper)
            ),
            OutsideDomain {
                param,
                value,
                allowed,
            } => write!(
                f,
                "`{param}` cannot be {}; it must be {allowed}",
                crate::number::format_si(*value)
            ),
            UnclosedAnnotation => write!(f, "this `{{` is never closed; expected `}}`"),
            EmptyAnnotation => write!(
                f,
                "empty annotation; expected a value, a range `lo..hi` or `fixed`"
            ),
            UnknownAnnotation(word) => write!(
                f,
                "`{word}` is not an annotation; expected a value, a range `lo..hi` or `fixed`"
            ),
            UnknownParamName { name, suggestion } => {
                write!(f, "the circuit has no parameter `{name}`")?;
                if let Some(s) = suggestion {
                    write!(f, "; did you mean `{s}`?")?;
                }
                Ok(())
            }
            BadRole(msg) => write!(f, "{msg}"),
        }
    }
}

/// An error in circuit text, with the text itself so it can be shown with a caret under the fault.
#[derive(Debug, Clone, PartialEq)]
pub struct CircuitError(Box<Inner>);

#[derive(Debug, Clone, PartialEq)]
struct Inner {
    kind: CircuitErrorKind,
    span: Span,
    text: String,
    origin: Option<String>,
}

impl CircuitError {
    pub(crate) fn new(kind: CircuitErrorKind, span: Span, text: &str) -> Self {
        CircuitError(Box::new(Inner {
            kind,
            span,
            text: text.to_owned(),
            origin: None,
        }))
    }

    pub(crate) fn set_text(&mut self, text: &str) {
        self.0.text = text.to_owned();
    }

    /// Names the file the text came from.
    pub fn with_origin(mut self, origin: impl Into<String>) -> Self {
        self.0.origin = Some(origin.into());
        self
    }

    /// What went wrong.
    pub fn kind(&self) -> &CircuitErrorKind {
        &self.0.kind
    }

    /// Where, as a byte range into [`CircuitError::text`].
    pub fn span(&self) -> Span {
        self.0.span.clone()
    }

    /// The whole circuit text.
    pub fn text(&self) -> &str {
        &self.0.text
    }

    /// Where the text came from (a file path), if not typed inline.
    pub fn origin(&self) -> Option<&str> {
        self.0.origin.as_deref()
    }

    /// 1-based line and column (in characters) of the start of the span.
    pub fn line_col(&self) -> (usize, usize) {
        let text = &self.0.text;
        let start = self.0.span.start.min(text.len());
        let before = &text[..floor_char(text, start)];
        let line = before.matches('\n').count() + 1;
        let col = before.rsplit('\n').next().map_or(0, |l| l.chars().count()) + 1;
        (line, col)
    }
}

fn floor_char(s: &str, mut i: usize) -> usize {
    while i > 0 && !s.is_char_boundary(i) {
        i -= 1;
    }
    i
}

impl fmt::Display for CircuitError {
    /// Shows the message, the place, the offending line and a caret run under the fault:
    ///
    /// ```text
    /// circuit error: unknown element kind in `X1`; ...
    ///  --> line 1, column 6
    ///   | R0 + X1
    ///   |      ^^
    /// ```
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let (line, col) = self.line_col();
        let Inner {
            kind,
            span,
            text,
            origin,
        } = &*self.0;
        writeln!(f, "circuit error: {kind}")?;
        match origin {
            Some(o) => writeln!(f, " --> {o}, line {line}, column {col}")?,
            None => writeln!(f, " --> line {line}, column {col}")?,
        }
        let start = floor_char(text, span.start.min(text.len()));
        let line_start = text[..start].rfind('\n').map_or(0, |i| i + 1);
        let line_end = text[start..].find('\n').map_or(text.len(), |i| start + i);
        let shown = text[line_start..line_end].trim_end_matches('\r');
        let end = floor_char(text, span.end.clamp(start, line_end.max(start)));
        let pad = text[line_start..start].chars().count();
        let width = text[start..end].chars().count().max(1);
        let (shown, pad, width) = window(shown, pad, width);
        writeln!(f, "  | {shown}")?;
        write!(f, "  | {}{}", " ".repeat(pad), "^".repeat(width))
    }
}

/// Longest line shown under an error, in characters; a longer one is cut to a window around the
/// fault, with `…` where text is left out (a generated circuit can be one line of many kilobytes).
const SHOWN_LINE: usize = 200;

/// The part of `line` to show, and the caret's offset and width in it (all in characters).
fn window(line: &str, pad: usize, width: usize) -> (String, usize, usize) {
    let len = line.chars().count();
    if len <= SHOWN_LINE {
        return (line.to_owned(), pad, width);
    }
    let first = pad.saturating_sub(SHOWN_LINE / 2).min(len - SHOWN_LINE);
    let last = first + SHOWN_LINE;
    let mut shown: String = line.chars().skip(first).take(SHOWN_LINE).collect();
    let mut pad = pad - first;
    if first > 0 {
        shown.insert(0, '…');
        pad += 1;
    }
    if last < len {
        shown.push('…');
    }
    let width = width.min(shown.chars().count().saturating_sub(pad)).max(1);
    (shown, pad, width)
}

impl std::error::Error for CircuitError {}

#[cfg(test)]
mod tests {
    use crate::circuit::parse;

    /// Issue 13: a fault deep in a 40,000-character line printed the whole line; the display shows a
    /// window of it with the caret still under the fault.
    #[test]
    fn a_long_line_is_shown_as_a_window_around_the_fault() {
        let text = format!("{}R0 + + R1", "R9 + ".repeat(8000));
        let shown = parse(&text).unwrap_err().to_string();
        let lines: Vec<&str> = shown.lines().collect();
        assert!(lines[2].chars().count() < 210, "{}", lines[2]);
        assert!(lines[2].starts_with("  | …"), "{}", lines[2]);
        // Columns in characters: the caret line is ASCII, the shown line starts with `…`.
        let caret = lines[3].find('^').unwrap();
        assert_eq!(lines[2].chars().nth(caret), Some('+'), "{shown}");
        assert_eq!(lines[2].chars().nth(caret - 2), Some('+'), "{shown}");
        assert!(lines[1].contains("column 40006"), "{}", lines[1]);
    }
}
