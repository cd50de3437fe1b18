//! Recursive-descent parser of the circuit language.
//!
//! ```text
//! text      := (expression-line | parameter-line | role-line | comment)*
//! series    := parallel ('+' parallel)*          impedances add
//! parallel  := primary ('|' primary)*            admittances add; binds tighter than '+'
//! primary   := element annotation? | '(' series ')'
//! element   := KIND LABEL                        KIND from the element library, longest match first;
//!                                                LABEL := [A-Za-z0-9_]*
//! annotation:= '{' clause (',' clause)* '}'
//! clause    := (PARAM '=')? item+                PARAM may be left out for one-parameter elements, and
//!                                                after the first clause (it then means the last named one)
//! item      := NUMBER | NUMBER? '..' NUMBER? | 'fixed'
//! parameter-line := FULLNAME '=' item+           e.g. `Qdl.n = 0.9 0.5..1`
//! role-line := 'role' RESISTOR '=' ROLE          e.g. `role Rct = charge-transfer`
//! ```
//!
//! `#` starts a comment that runs to the end of the line. Numbers take SI prefixes (`4.7u`, `2k`).

use super::ast::{Circuit, Element, Node, Param, Role, Span};
use super::error::{CircuitError, CircuitErrorKind as K};
use crate::element::{Domain, kind_for_name};
use crate::number::parse_si;

/// Annotations collected for one parameter, with the spans needed for error messages.
#[derive(Debug, Clone, Default)]
struct Ann {
    initial: Option<(f64, Span)>,
    lower: Option<(f64, Span)>,
    upper: Option<(f64, Span)>,
    fixed: bool,
    range_span: Option<Span>,
}

/// Parses circuit text (an inline expression or the contents of a circuit file).
///
/// # Errors
///
/// A [`CircuitError`] pointing at the first fault, with what was expected there.
pub fn parse(text: &str) -> Result<Circuit, CircuitError> {
    let lines = classify_lines(text);
    let mut masked = text.as_bytes().to_vec();
    for (range, class) in &lines {
        if *class != LineClass::Expression {
            masked[range.clone()].fill(b' ');
        }
    }
    // Comments are blanked too; every blanked range is whole lines or starts at an ASCII '#', so the
    // result is still UTF-8 with the same byte offsets as `text`.
    for range in comment_ranges(text) {
        masked[range].fill(b' ');
    }
    let masked = String::from_utf8(masked).expect("blanking whole characters keeps UTF-8");
    // Errors are built against the masked text and shown with the original.
    parse_masked(text, &masked, &lines).map_err(|mut e| {
        e.set_text(text);
        e
    })
}

fn parse_masked(
    text: &str,
    masked: &str,
    lines: &[(Span, LineClass)],
) -> Result<Circuit, CircuitError> {
    let mut p = Parser {
        src: masked,
        text: masked,
        pos: 0,
        elements: Vec::new(),
        anns: Vec::new(),
        element_spans: Vec::new(),
        depth: 0,
    };
    let root = p.parse_top()?;
    let Parser {
        elements,
        mut anns,
        element_spans,
        ..
    } = p;

    let mut params = Vec::new();
    let mut circuit_elements = Vec::new();
    for (i, (kind, name)) in elements.into_iter().enumerate() {
        if circuit_elements.iter().any(|e: &Element| e.name == name) {
            return Err(CircuitError::new(
                K::DuplicateName(name),
                element_spans[i].clone(),
                text,
            ));
        }
        let first = params.len();
        for (k, info) in kind.params.iter().enumerate() {
            let pname = if kind.params.len() == 1 {
                name.clone()
            } else {
                format!("{name}.{}", info.name)
            };
            params.push(Param {
                name: pname,
                element: i,
                index: k,
                initial: None,
                lower: None,
                upper: None,
                fixed: false,
            });
        }
        circuit_elements.push(Element {
            kind,
            name,
            first_param: first,
        });
    }

    let mut roles = Vec::new();
    for (range, class) in lines {
        match class {
            LineClass::Parameter => parse_param_line(text, range.clone(), &params, &mut anns)?,
            LineClass::Role => {
                roles.push(parse_role_line(text, range.clone(), &circuit_elements)?);
            }
            LineClass::Expression => {}
        }
    }

    let mut circuit = Circuit {
        root,
        elements: circuit_elements,
        params,
        roles,
    };
    for (i, ann) in anns.iter().enumerate() {
        apply_annotation(&mut circuit, i, ann, text)?;
    }
    Ok(circuit)
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum LineClass {
    Expression,
    Parameter,
    Role,
}

/// Byte ranges of `#` comments (to the end of their line).
fn comment_ranges(text: &str) -> Vec<Span> {
    let mut out = Vec::new();
    let mut start = 0;
    for line in text.split_inclusive('\n') {
        if let Some(i) = line.find('#') {
            let end = line.strip_suffix('\n').map_or(line.len(), |l| l.len());
            out.push(start + i..start + end);
        }
        start += line.len();
    }
    out
}

/// Splits the text into lines (without their comment) and classifies each.
fn classify_lines(text: &str) -> Vec<(Span, LineClass)> {
    let mut out = Vec::new();
    let mut start = 0;
    for line in text.split_inclusive('\n') {
        let body = line.split('#').next().unwrap_or("");
        let body = body.trim_end_matches(['\n', '\r']);
        let range = start..start + body.len();
        start += line.len();
        let trimmed = body.trim_start();
        let class = if trimmed.starts_with("role") && trimmed[4..].starts_with(char::is_whitespace)
        {
            LineClass::Role
        } else if has_top_level_equals(body) {
            LineClass::Parameter
        } else {
            LineClass::Expression
        };
        out.push((range, class));
    }
    out
}

fn has_top_level_equals(s: &str) -> bool {
    let mut depth = 0i32;
    for c in s.chars() {
        match c {
            '{' => depth += 1,
            '}' => depth -= 1,
            '=' if depth <= 0 => return true,
            _ => {}
        }
    }
    false
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Tok {
    Plus,
    Bar,
    Open,
    Close,
    Name,
    Other(char),
    End,
}

impl Tok {
    fn op_char(self) -> Option<char> {
        match self {
            Tok::Plus => Some('+'),
            Tok::Bar => Some('|'),
            _ => None,
        }
    }
}

/// The operator just consumed before a part, with its span (`None` at the start of a level).
type After = Option<(char, Span)>;

struct Parser<'a> {
    /// The text with comments and non-expression lines blanked.
    src: &'a str,
    /// The original text, for error display.
    text: &'a str,
    pos: usize,
    elements: Vec<(&'static crate::element::ElementKind, String)>,
    /// One entry per parameter, in the order parameters are created.
    anns: Vec<Ann>,
    element_spans: Vec<Span>,
    /// Parentheses open at the current position (bounded by [`MAX_NESTING`]).
    depth: usize,
}

/// Deepest nesting of parentheses the parser accepts. The parser, the printer and the evaluator's
/// compile step recurse once per level, so a bound keeps a hostile or mistaken text (20,000 `(`)
/// from overflowing the stack; no real circuit comes near it. A tree built from such a text is at
/// most about twice as deep (an element under alternating series and parallel nodes).
pub const MAX_NESTING: usize = 64;

impl<'a> Parser<'a> {
    fn err(&self, kind: K, span: Span) -> CircuitError {
        CircuitError::new(kind, span, self.text)
    }

    fn skip_ws(&mut self) {
        let rest = &self.src[self.pos..];
        self.pos += rest.len() - rest.trim_start().len();
    }

    /// The next token and its span, without consuming it.
    fn peek(&mut self) -> (Tok, Span) {
        self.skip_ws();
        let rest = &self.src[self.pos..];
        let Some(c) = rest.chars().next() else {
            return (Tok::End, self.pos..self.pos);
        };
        let one = self.pos..self.pos + c.len_utf8();
        let tok = match c {
            '+' => Tok::Plus,
            '|' => Tok::Bar,
            '(' => Tok::Open,
            ')' => Tok::Close,
            c if c.is_ascii_alphabetic() => {
                let len = rest
                    .find(|ch: char| !(ch.is_ascii_alphanumeric() || ch == '_'))
                    .unwrap_or(rest.len());
                return (Tok::Name, self.pos..self.pos + len);
            }
            c => Tok::Other(c),
        };
        (tok, one)
    }

    /// `text := series` followed by the end of input.
    fn parse_top(&mut self) -> Result<Node, CircuitError> {
        let (tok, span) = self.peek();
        if tok == Tok::End {
            return Err(self.err(K::Empty, span));
        }
        let node = self.parse_series(None)?;
        let (tok, span) = self.peek();
        match tok {
            Tok::End => Ok(node),
            Tok::Close => Err(self.err(K::UnmatchedCloseParen, span)),
            Tok::Name | Tok::Open => Err(self.err(K::MissingOperator, span)),
            Tok::Other(c) => Err(self.err(K::UnexpectedChar(c), span)),
            Tok::Plus | Tok::Bar => unreachable!("series consumes every operator"),
        }
    }

    /// `series := parallel ('+' parallel)*`. `open` is the span of the enclosing `(`, if any.
    fn parse_series(&mut self, open: Option<&Span>) -> Result<Node, CircuitError> {
        self.parse_joined(None, open, (Tok::Plus, '+'), Self::parse_parallel)
    }

    /// `parallel := primary ('|' primary)*`.
    fn parse_parallel(
        &mut self,
        after: Option<(char, Span)>,
        open: Option<&Span>,
    ) -> Result<Node, CircuitError> {
        self.parse_joined(after, open, (Tok::Bar, '|'), Self::parse_primary)
    }

    /// Parts of one level joined by `op` (`+` in series, `|` in parallel), each read by `part`, which
    /// is given the operator before it (`after` for the first).
    fn parse_joined(
        &mut self,
        after: Option<(char, Span)>,
        open: Option<&Span>,
        (joiner, op): (Tok, char),
        part: fn(&mut Self, After, Option<&Span>) -> Result<Node, CircuitError>,
    ) -> Result<Node, CircuitError> {
        let mut parts = vec![part(self, after, open)?];
        loop {
            let (tok, span) = self.peek();
            if tok != joiner {
                break;
            }
            self.pos = span.end;
            parts.push(part(self, Some((op, span)), open)?);
        }
        Ok(flatten(parts, joiner == Tok::Plus))
    }

    /// `primary := element annotation? | '(' series ')'`. `after` is the operator just consumed.
    fn parse_primary(
        &mut self,
        after: Option<(char, Span)>,
        open: Option<&Span>,
    ) -> Result<Node, CircuitError> {
        let (tok, span) = self.peek();
        match tok {
            Tok::Name => {
                self.pos = span.end;
                self.element(span)
            }
            Tok::Open => {
                self.pos = span.end;
                let (next, next_span) = self.peek();
                if next == Tok::Close {
                    return Err(self.err(K::EmptyGroup, span.start..next_span.end));
                }
                if self.depth >= MAX_NESTING {
                    return Err(self.err(K::TooDeep(MAX_NESTING), span));
                }
                self.depth += 1;
                let inner = self.parse_series(Some(&span));
                self.depth -= 1;
                let inner = inner?;
                let (close, close_span) = self.peek();
                match close {
                    Tok::Close => {
                        self.pos = close_span.end;
                        Ok(inner)
                    }
                    Tok::End => Err(self.err(K::UnclosedParen, span)),
                    Tok::Name | Tok::Open => Err(self.err(K::MissingOperator, close_span)),
                    Tok::Other(c) => Err(self.err(K::UnexpectedChar(c), close_span)),
                    Tok::Plus | Tok::Bar => unreachable!("series consumes every operator"),
                }
            }
            Tok::Plus | Tok::Bar => {
                let c = tok.op_char().expect("operator");
                match after {
                    Some((prev, _)) => Err(self.err(K::DoubledOperator(prev, c), span)),
                    None => Err(self.err(K::DanglingOperator(c), span)),
                }
            }
            Tok::End | Tok::Close => match after {
                Some((prev, op_span)) => Err(self.err(K::DanglingOperator(prev), op_span)),
                None if tok == Tok::End => match open {
                    Some(o) => Err(self.err(K::UnclosedParen, o.clone())),
                    None => Err(self.err(K::Empty, span)),
                },
                None => Err(self.err(K::UnmatchedCloseParen, span)),
            },
            Tok::Other(c) => Err(self.err(K::UnexpectedChar(c), span)),
        }
    }

    /// `element := KIND LABEL annotation?`, the name already scanned as `span`.
    fn element(&mut self, span: Span) -> Result<Node, CircuitError> {
        let src = self.src;
        let name = &src[span.clone()];
        let Some(kind) = kind_for_name(name) else {
            return Err(self.err(K::UnknownKind(name.to_owned()), span));
        };
        let index = self.elements.len();
        self.elements.push((kind, name.to_owned()));
        self.element_spans.push(span.clone());
        let first = self.anns.len();
        self.anns
            .extend(std::iter::repeat_n(Ann::default(), kind.params.len()));
        self.skip_ws();
        if self.src[self.pos..].starts_with('{') {
            let open = self.pos;
            let Some(len) = self.src[open..].find('}') else {
                return Err(self.err(K::UnclosedAnnotation, open..open + 1));
            };
            let body = open + 1..open + len;
            self.pos = open + len + 1;
            parse_annotation(
                self.text,
                body,
                kind,
                name,
                &mut self.anns[first..first + kind.params.len()],
            )?;
        }
        Ok(Node::Element(index))
    }
}

/// Builds a series (`series = true`) or parallel node, flattening children of the same kind.
fn flatten(parts: Vec<Node>, series: bool) -> Node {
    if parts.len() == 1 {
        return parts.into_iter().next().expect("one part");
    }
    let mut out = Vec::with_capacity(parts.len());
    for p in parts {
        match (p, series) {
            (Node::Series(c), true) | (Node::Parallel(c), false) => out.extend(c),
            (p, _) => out.push(p),
        }
    }
    if series {
        Node::Series(out)
    } else {
        Node::Parallel(out)
    }
}

/// Words of an annotation body with their spans: split at whitespace, `,` and `=`, which are returned
/// as one-character words.
fn words(text: &str, body: Span) -> Vec<(String, Span)> {
    let mut out = Vec::new();
    let s = &text[body.clone()];
    let mut start: Option<usize> = None;
    for (i, c) in s.char_indices() {
        let sep = c.is_whitespace() || c == ',' || c == '=';
        if sep {
            if let Some(st) = start.take() {
                out.push((s[st..i].to_owned(), body.start + st..body.start + i));
            }
            if c == ',' || c == '=' {
                out.push((c.to_string(), body.start + i..body.start + i + 1));
            }
        } else if start.is_none() {
            start = Some(i);
        }
    }
    if let Some(st) = start {
        out.push((s[st..].to_owned(), body.start + st..body.end));
    }
    out
}

fn parse_number(text: &str, word: &str, span: Span) -> Result<f64, CircuitError> {
    parse_si(word).ok_or_else(|| CircuitError::new(K::BadNumber(word.to_owned()), span, text))
}

/// Applies one item (`50`, `1m..1k`, `..1k`, `fixed`) to `ann`.
fn apply_item(text: &str, word: &str, span: Span, ann: &mut Ann) -> Result<(), CircuitError> {
    let repeated = |what| Err(CircuitError::new(K::Repeated(what), span.clone(), text));
    if word == "fixed" {
        if ann.fixed {
            return repeated("`fixed` flag");
        }
        ann.fixed = true;
    } else if let Some((lo, hi)) = word.split_once("..") {
        if ann.range_span.is_some() {
            return repeated("range");
        }
        let lo_span = span.start..span.start + lo.len();
        let hi_span = span.start + lo.len() + 2..span.end;
        if !lo.is_empty() {
            ann.lower = Some((parse_number(text, lo, lo_span.clone())?, lo_span));
        }
        if !hi.is_empty() {
            ann.upper = Some((parse_number(text, hi, hi_span.clone())?, hi_span));
        }
        ann.range_span = Some(span);
    } else if word.starts_with(|c: char| c.is_ascii_digit() || matches!(c, '.' | '-' | '+')) {
        let v = parse_number(text, word, span.clone())?;
        if ann.initial.is_some() {
            return repeated("initial value");
        }
        ann.initial = Some((v, span));
    } else {
        return Err(CircuitError::new(
            K::UnknownAnnotation(word.to_owned()),
            span,
            text,
        ));
    }
    Ok(())
}

/// `annotation := '{' clause (',' clause)* '}'` (the body between the braces).
fn parse_annotation(
    text: &str,
    body: Span,
    kind: &'static crate::element::ElementKind,
    element: &str,
    anns: &mut [Ann],
) -> Result<(), CircuitError> {
    let names: Vec<&'static str> = kind.params.iter().map(|p| p.name).collect();
    let ws = words(text, body.clone());
    let mut current: Option<usize> = if names.len() == 1 { Some(0) } else { None };
    let mut i = 0;
    let mut any = false;
    while i < ws.len() {
        let (w, span) = &ws[i];
        if w == "," {
            i += 1;
            continue;
        }
        if ws.get(i + 1).is_some_and(|(n, _)| n == "=") {
            let Some(k) = names.iter().position(|n| n == w) else {
                return Err(CircuitError::new(
                    K::UnknownParam {
                        element: element.to_owned(),
                        param: w.clone(),
                        known: names,
                    },
                    span.clone(),
                    text,
                ));
            };
            current = Some(k);
            i += 2;
            continue;
        }
        if w == "=" {
            return Err(CircuitError::new(
                K::UnexpectedChar('='),
                span.clone(),
                text,
            ));
        }
        let Some(k) = current else {
            return Err(CircuitError::new(
                K::MissingParamName { known: names },
                span.clone(),
                text,
            ));
        };
        apply_item(text, w, span.clone(), &mut anns[k])?;
        any = true;
        i += 1;
    }
    if !any {
        return Err(CircuitError::new(
            K::EmptyAnnotation,
            body.start.saturating_sub(1)..body.end + 1,
            text,
        ));
    }
    Ok(())
}

/// `parameter-line := FULLNAME '=' item+`.
fn parse_param_line(
    text: &str,
    range: Span,
    params: &[Param],
    anns: &mut [Ann],
) -> Result<(), CircuitError> {
    let line = &text[range.clone()];
    let eq = line.find('=').expect("parameter lines hold `=`");
    let name = line[..eq].trim();
    let name_start = range.start + line[..eq].find(name).unwrap_or(0);
    let name_span = name_start..name_start + name.len().max(1);
    let Some(idx) = params.iter().position(|p| p.name == name) else {
        let suggestion = closest(name, params.iter().map(|p| p.name.as_str()));
        return Err(CircuitError::new(
            K::UnknownParamName {
                name: name.to_owned(),
                suggestion,
            },
            name_span,
            text,
        ));
    };
    let items = words(text, range.start + eq + 1..range.end);
    if items.is_empty() {
        return Err(CircuitError::new(
            K::EmptyAnnotation,
            range.end..range.end,
            text,
        ));
    }
    for (w, span) in items {
        if w == "," {
            continue;
        }
        if w == "=" {
            return Err(CircuitError::new(K::UnexpectedChar('='), span, text));
        }
        apply_item(text, &w, span, &mut anns[idx])?;
    }
    Ok(())
}

/// `role-line := 'role' RESISTOR '=' ROLE`.
fn parse_role_line(
    text: &str,
    range: Span,
    elements: &[Element],
) -> Result<(String, Role), CircuitError> {
    let line = &text[range.clone()];
    let lead = line.len() - line.trim_start().len();
    let rest_start = range.start + lead + 4;
    let rest = &text[rest_start..range.end];
    let bad = |msg: String, span: Span| Err(CircuitError::new(K::BadRole(msg), span, text));
    let Some(eq) = rest.find('=') else {
        return bad(
            "a role line reads `role <resistor> = film|charge-transfer|contact|other`".into(),
            range,
        );
    };
    let name = rest[..eq].trim();
    let word = rest[eq + 1..].trim();
    let name_start = rest_start + rest[..eq].find(name).unwrap_or(0);
    let word_start = rest_start + eq + 1 + rest[eq + 1..].find(word).unwrap_or(0);
    let name_span = name_start..name_start + name.len().max(1);
    let word_span = word_start..word_start + word.len().max(1);
    match elements.iter().find(|e| e.name == name) {
        Some(e) if e.kind.class == crate::element::Class::Resistive => {}
        Some(_) => {
            return bad(
                format!("a role names the resistor of an arc; `{name}` is not a resistor"),
                name_span,
            );
        }
        None => {
            return bad(format!("the circuit has no element `{name}`"), name_span);
        }
    }
    match Role::from_word(word) {
        Some(r) => Ok((name.to_owned(), r)),
        None => bad(
            format!(
                "unknown role `{word}`; expected film, charge-transfer, contact, diffusion or other"
            ),
            word_span,
        ),
    }
}

/// Checks an annotation against the parameter's domain and its own bounds, then stores it.
fn apply_annotation(
    circuit: &mut Circuit,
    i: usize,
    ann: &Ann,
    text: &str,
) -> Result<(), CircuitError> {
    let err = |kind, span: &Span| Err(CircuitError::new(kind, span.clone(), text));
    let info = circuit.info(i);
    let name = circuit.params[i].name.clone();
    let (dlo, dhi, allowed) = match info.domain {
        Domain::Positive => (0.0, f64::INFINITY, "positive".to_owned()),
        Domain::Interval(lo, hi) => (lo, hi, format!("between {lo} and {hi}")),
    };
    let in_domain = |v: f64, is_initial: bool| match info.domain {
        Domain::Positive if is_initial => v > 0.0,
        Domain::Positive => v >= 0.0,
        Domain::Interval(lo, hi) => (lo..=hi).contains(&v),
    };
    for (v, span, is_initial) in [
        ann.initial.as_ref().map(|(v, s)| (*v, s, true)),
        ann.lower.as_ref().map(|(v, s)| (*v, s, false)),
        ann.upper.as_ref().map(|(v, s)| (*v, s, false)),
    ]
    .into_iter()
    .flatten()
    {
        if !in_domain(v, is_initial) {
            return err(
                K::OutsideDomain {
                    param: name.clone(),
                    value: v,
                    allowed: allowed.clone(),
                },
                span,
            );
        }
    }
    let lo = ann.lower.as_ref().map_or(dlo, |l| l.0);
    let hi = ann.upper.as_ref().map_or(dhi, |u| u.0);
    if lo >= hi {
        let span = ann
            .range_span
            .clone()
            .expect("one bound is the user's when they cross");
        return err(
            K::InvertedBounds {
                lower: lo,
                upper: hi,
            },
            &span,
        );
    }
    if let Some((v, span)) = &ann.initial {
        if *v < lo || *v > hi {
            return err(
                K::InitialOutsideBounds {
                    value: *v,
                    lower: lo,
                    upper: hi,
                },
                span,
            );
        }
    }
    let p = &mut circuit.params[i];
    p.initial = ann.initial.as_ref().map(|x| x.0);
    p.lower = ann.lower.as_ref().map(|x| x.0);
    p.upper = ann.upper.as_ref().map(|x| x.0);
    p.fixed = ann.fixed;
    Ok(())
}

/// The candidate with the smallest edit distance to `name`, if it is close (at most a third of the
/// length, and at least one edit allowed).
pub(crate) fn closest<'a>(name: &str, candidates: impl Iterator<Item = &'a str>) -> Option<String> {
    let limit = (name.chars().count() / 3).max(1);
    candidates
        .map(|c| (levenshtein(name, c), c))
        .filter(|(d, _)| *d <= limit)
        .min_by_key(|(d, _)| *d)
        .map(|(_, c)| c.to_owned())
}

/// Edit distance counting insertions, deletions, substitutions and swaps of neighbours as one edit
/// (optimal string alignment), so `Rtc` is one edit from `Rct`.
fn levenshtein(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.chars().collect();
    let b: Vec<char> = b.chars().collect();
    let w = b.len() + 1;
    let mut d = vec![0usize; (a.len() + 1) * w];
    for i in 0..=a.len() {
        d[i * w] = i;
    }
    for (j, slot) in d.iter_mut().enumerate().take(w) {
        *slot = j;
    }
    for i in 1..=a.len() {
        for j in 1..=b.len() {
            let cost = usize::from(a[i - 1] != b[j - 1]);
            let mut v = (d[(i - 1) * w + j] + 1)
                .min(d[i * w + j - 1] + 1)
                .min(d[(i - 1) * w + j - 1] + cost);
            if i > 1 && j > 1 && a[i - 1] == b[j - 2] && a[i - 2] == b[j - 1] {
                v = v.min(d[(i - 2) * w + j - 2] + 1);
            }
            d[i * w + j] = v;
        }
    }
    d[a.len() * w + b.len()]
}

/// See [`Circuit::apply_override`].
pub(crate) fn apply_override(circuit: &mut Circuit, arg: &str) -> Result<(), CircuitError> {
    let split = arg
        .find(|c: char| c == '=' || c.is_whitespace())
        .unwrap_or(arg.len());
    let name = &arg[..split];
    let Some(idx) = circuit.param_index(name) else {
        let suggestion = closest(name, circuit.params.iter().map(|p| p.name.as_str()));
        return Err(CircuitError::new(
            K::UnknownParamName {
                name: name.to_owned(),
                suggestion,
            },
            0..name.len().max(1),
            arg,
        ));
    };
    let p = &circuit.params[idx];
    let whole = 0..arg.len();
    let mut ann = Ann {
        initial: p.initial.map(|v| (v, whole.clone())),
        lower: p.lower.map(|v| (v, whole.clone())),
        upper: p.upper.map(|v| (v, whole.clone())),
        fixed: p.fixed,
        range_span: (p.lower.is_some() || p.upper.is_some()).then(|| whole.clone()),
    };
    // Past the separator, which may be a multi-byte blank (a no-break space).
    let rest = split + arg[split..].chars().next().map_or(0, char::len_utf8);
    let items: Vec<_> = words(arg, rest..arg.len())
        .into_iter()
        .filter(|(w, _)| w != ",")
        .collect();
    if items.is_empty() {
        return Err(CircuitError::new(
            K::EmptyAnnotation,
            arg.len()..arg.len(),
            arg,
        ));
    }
    for (w, span) in items {
        if w == "=" {
            return Err(CircuitError::new(K::UnexpectedChar('='), span, arg));
        }
        // An override replaces what the circuit said.
        if w == "fixed" {
            ann.fixed = false;
        } else if w.contains("..") {
            ann.lower = None;
            ann.upper = None;
            ann.range_span = None;
        } else {
            ann.initial = None;
        }
        apply_item(arg, &w, span, &mut ann)?;
    }
    apply_annotation(circuit, idx, &ann, arg)
}
