//! A YAML document as a tree of nodes that remember their line and column.
//!
//! serde stops at the first problem and forgets positions, but the campaign checker must report
//! every problem at once with `file:line:column`. So the campaign is parsed with the pure-Rust
//! `saphyr-parser` event parser into this small tree, which the campaign decoder walks.

use std::collections::HashMap;
use std::path::Path;

use saphyr_parser::{Event, Parser, ScalarStyle, Span};

use crate::diag::Diagnostic;

/// A YAML node with its 1-based position.
#[derive(Debug, Clone, PartialEq)]
pub struct Node {
    pub value: Value,
    pub line: usize,
    pub column: usize,
}

/// The content of a node. Scalars keep their text; typing happens where the schema is known.
#[derive(Debug, Clone, PartialEq)]
pub enum Value {
    /// A scalar; `plain` is false when it was quoted or a block scalar (always a string then).
    Scalar {
        text: String,
        plain: bool,
    },
    Seq(Vec<Node>),
    /// Entries in file order.
    Map(Vec<(Node, Node)>),
}

impl Node {
    /// True for an empty plain scalar, `~` or `null`.
    pub fn is_null(&self) -> bool {
        matches!(&self.value, Value::Scalar { text, plain: true }
            if text.is_empty() || text == "~" || text == "null" || text == "Null" || text == "NULL")
    }

    /// The scalar text, if this is a scalar.
    pub fn scalar(&self) -> Option<&str> {
        match &self.value {
            Value::Scalar { text, .. } => Some(text),
            _ => None,
        }
    }

    /// What kind of node this is, for messages.
    pub fn describe(&self) -> &'static str {
        match &self.value {
            Value::Scalar { .. } if self.is_null() => "nothing (null)",
            Value::Scalar { .. } => "a scalar",
            Value::Seq(_) => "a list",
            Value::Map(_) => "a mapping",
        }
    }

    /// Convert to JSON with YAML 1.2 core-schema typing of plain scalars (used for plugin
    /// parameters, which the plugin's declared schema then checks).
    pub fn to_json(&self) -> serde_json::Value {
        match &self.value {
            Value::Scalar { .. } if self.is_null() => serde_json::Value::Null,
            Value::Scalar { text, plain: true } => plain_scalar_json(text),
            Value::Scalar { text, plain: false } => serde_json::Value::String(text.clone()),
            Value::Seq(items) => items.iter().map(Node::to_json).collect(),
            Value::Map(entries) => serde_json::Value::Object(
                entries
                    .iter()
                    .map(|(k, v)| (k.scalar().unwrap_or_default().to_string(), v.to_json()))
                    .collect(),
            ),
        }
    }
}

fn plain_scalar_json(text: &str) -> serde_json::Value {
    match text {
        "true" | "True" | "TRUE" => return serde_json::Value::Bool(true),
        "false" | "False" | "FALSE" => return serde_json::Value::Bool(false),
        _ => {}
    }
    if let Ok(i) = text.parse::<i64>() {
        return serde_json::Value::from(i);
    }
    match parse_yaml_float(text).and_then(serde_json::Number::from_f64) {
        Some(n) => serde_json::Value::Number(n),
        None => serde_json::Value::String(text.to_string()),
    }
}

/// Parse a YAML 1.2 core-schema float (decimal or exponent form; `.inf` and `.nan` are refused
/// because no campaign value may be infinite or undefined).
pub fn parse_yaml_float(text: &str) -> Option<f64> {
    let t = text.trim();
    let ok = !t.is_empty()
        && t.chars()
            .all(|c| c.is_ascii_digit() || matches!(c, '.' | '-' | '+' | 'e' | 'E'))
        && t.chars().any(|c| c.is_ascii_digit());
    if !ok {
        return None;
    }
    t.parse::<f64>().ok().filter(|v| v.is_finite())
}

/// Most nodes a document may hold once its aliases are expanded: far above any campaign or
/// beam-data file (a thousand tests are about 50,000 nodes), far below what exhausts memory.
/// Aliases copy the anchored node, so a few hundred bytes of nested aliases could otherwise
/// expand to billions of nodes.
pub const MAX_NODES: usize = 1_000_000;
/// Deepest nesting of lists and mappings accepted (a campaign needs fewer than 10 levels).
pub const MAX_DEPTH: usize = 64;

fn node_count(n: &Node) -> usize {
    1 + match &n.value {
        Value::Scalar { .. } => 0,
        Value::Seq(items) => items.iter().map(node_count).sum(),
        Value::Map(entries) => entries
            .iter()
            .map(|(k, v)| node_count(k) + node_count(v))
            .sum(),
    }
}

fn pos(span: &Span) -> (usize, usize) {
    (span.start.line(), span.start.col() + 1)
}

/// Parse YAML text into one document tree. Syntax errors, several documents, duplicate keys and
/// non-scalar keys are diagnostics; the first syntax error ends parsing (the parser cannot go on).
pub fn parse(text: &str, file: &Path) -> Result<Node, Vec<Diagnostic>> {
    let mut stack: Vec<(Node, Option<usize>)> = Vec::new();
    let mut pending_keys: Vec<Option<Node>> = Vec::new();
    let mut anchors: HashMap<usize, (Node, usize)> = HashMap::new();
    let mut nodes = 0usize;
    let mut root: Option<Node> = None;
    let mut diags = Vec::new();
    let mut documents = 0usize;

    for item in Parser::new_from_str(text) {
        let (event, span) = match item {
            Ok(ok) => ok,
            Err(e) => {
                let m = e.marker();
                diags.push(
                    Diagnostic::at(
                        file,
                        m.line(),
                        m.col() + 1,
                        format!("YAML syntax error: {}", e.info()),
                    )
                    .help("fix the YAML syntax at this place (indentation, a missing `:` or an unclosed quote are common causes)"),
                );
                return Err(diags);
            }
        };
        let (line, column) = pos(&span);
        let too_much = |what: String| {
            vec![
                Diagnostic::at(file, line, column, what)
                    .help("write the values out plainly; a campaign needs neither deep nesting nor aliases of aliases"),
            ]
        };
        if matches!(
            event,
            Event::Scalar(..) | Event::SequenceStart(..) | Event::MappingStart(..)
        ) {
            nodes += 1;
        }
        if stack.len() > MAX_DEPTH {
            return Err(too_much(format!(
                "lists and mappings nest deeper than {MAX_DEPTH} levels here"
            )));
        }
        let finished: Option<(Node, usize)> = match event {
            Event::DocumentStart(_) => {
                documents += 1;
                if documents == 2 {
                    diags.push(
                        Diagnostic::at(file, line, column, "a second YAML document starts here")
                            .help("a campaign file holds one document: remove the `---` line or move the rest into another file"),
                    );
                }
                None
            }
            Event::Scalar(text, style, anchor, _tag) => Some((
                Node {
                    value: Value::Scalar {
                        text: text.into_owned(),
                        plain: style == ScalarStyle::Plain,
                    },
                    line,
                    column,
                },
                anchor,
            )),
            Event::Alias(id) => match anchors.get(&id) {
                Some((n, size)) => {
                    // Counted before it is copied: the copy is never made when too large.
                    nodes = nodes.saturating_add(*size);
                    if nodes > MAX_NODES {
                        return Err(too_much(format!(
                            "the aliases expand the document past {MAX_NODES} nodes here"
                        )));
                    }
                    Some((n.clone(), 0))
                }
                None => {
                    diags.push(Diagnostic::at(
                        file,
                        line,
                        column,
                        "alias to an unknown anchor",
                    ));
                    None
                }
            },
            Event::SequenceStart(anchor, _) => {
                stack.push((
                    Node {
                        value: Value::Seq(Vec::new()),
                        line,
                        column,
                    },
                    Some(anchor),
                ));
                None
            }
            Event::MappingStart(anchor, _) => {
                stack.push((
                    Node {
                        value: Value::Map(Vec::new()),
                        line,
                        column,
                    },
                    Some(anchor),
                ));
                pending_keys.push(None);
                None
            }
            Event::SequenceEnd => stack.pop().map(|(n, a)| (n, a.unwrap_or(0))),
            Event::MappingEnd => {
                pending_keys.pop();
                stack.pop().map(|(n, a)| (n, a.unwrap_or(0)))
            }
            _ => None,
        };
        let Some((node, anchor)) = finished else {
            continue;
        };
        if anchor > 0 {
            anchors.insert(anchor, (node.clone(), node_count(&node)));
        }
        if documents > 1 {
            continue;
        }
        match stack.last_mut() {
            None => root = Some(node),
            Some((parent, _)) => match &mut parent.value {
                Value::Seq(items) => items.push(node),
                Value::Map(entries) => {
                    let slot = pending_keys.last_mut();
                    match slot {
                        Some(slot @ None) => {
                            if node.scalar().is_none() {
                                diags.push(Diagnostic::at(
                                    file,
                                    node.line,
                                    node.column,
                                    "a mapping key must be a plain word, not a list or mapping",
                                ));
                            } else if let Some((first, _)) =
                                entries.iter().find(|(k, _)| k.scalar() == node.scalar())
                            {
                                diags.push(
                                    Diagnostic::at(
                                        file,
                                        node.line,
                                        node.column,
                                        format!(
                                            "duplicate key `{}` (first given at line {})",
                                            node.scalar().unwrap_or_default(),
                                            first.line
                                        ),
                                    )
                                    .help("keep one of the two entries"),
                                );
                            }
                            *slot = Some(node);
                        }
                        Some(slot) => {
                            if let Some(key) = slot.take() {
                                entries.push((key, node));
                            }
                        }
                        None => {}
                    }
                }
                Value::Scalar { .. } => {}
            },
        }
    }
    match (root, diags.is_empty()) {
        (Some(root), true) => Ok(root),
        (None, true) => Err(vec![
            Diagnostic::file(file, "the file is empty")
                .help("start from demo-campaign/campaign.yaml"),
        ]),
        _ => Err(diags),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn p(text: &str) -> Result<Node, Vec<Diagnostic>> {
        parse(text, Path::new("t.yaml"))
    }

    #[test]
    fn keeps_positions_and_order() {
        let n = p("b: 1\na:\n  - x\n  - 'y'\n").expect("parse");
        let Value::Map(entries) = &n.value else {
            panic!("map expected")
        };
        assert_eq!(entries[0].0.scalar(), Some("b"));
        assert_eq!((entries[0].1.line, entries[0].1.column), (1, 4));
        let Value::Seq(items) = &entries[1].1.value else {
            panic!("seq expected")
        };
        assert_eq!((items[1].line, items[1].column), (4, 5));
        assert_eq!(
            items[1].value,
            Value::Scalar {
                text: "y".into(),
                plain: false
            }
        );
    }

    #[test]
    fn reports_duplicate_keys_at_the_second_one() {
        let errs = p("a: 1\nb: 2\na: 3\n").expect_err("duplicate");
        assert_eq!(errs.len(), 1);
        assert_eq!((errs[0].line, errs[0].column), (3, 1));
        assert!(errs[0].message.contains("first given at line 1"));
    }

    #[test]
    fn syntax_error_has_a_position() {
        let errs = p("a: [1, 2\nb: 3\n").expect_err("unclosed flow sequence");
        assert!(errs[0].line >= 1 && errs[0].message.starts_with("YAML syntax error"));
    }

    #[test]
    fn aliases_copy_the_anchored_node() {
        let n = p("a: &x {k: 1}\nb: *x\n").expect("parse");
        let Value::Map(entries) = &n.value else {
            panic!("map expected")
        };
        assert_eq!(entries[1].1.to_json(), serde_json::json!({"k": 1}));
    }

    #[test]
    fn nested_aliases_are_refused_before_they_expand() {
        // The "billion laughs" pattern: each level holds nine aliases of the one before, so
        // ten levels would expand to 9^10 (about 3.5e9) nodes (common practice, no source).
        let mut text = String::from("a0: &a0 [x, x, x, x, x, x, x, x, x]\n");
        for i in 1..10 {
            let p = i - 1;
            text.push_str(&format!(
                "a{i}: &a{i} [*a{p}, *a{p}, *a{p}, *a{p}, *a{p}, *a{p}, *a{p}, *a{p}, *a{p}]\n"
            ));
        }
        assert!(text.len() < 700);
        let errs = p(&text).expect_err("refused");
        assert!(
            errs[0]
                .message
                .contains("expand the document past 1000000 nodes"),
            "{}",
            errs[0].message
        );
        // Aliases within the limit still work.
        assert!(p("a: &x [1, 2]\nb: [*x, *x]\n").is_ok());
    }

    #[test]
    fn deep_nesting_is_refused() {
        let text = format!("a: {}{}\n", "[".repeat(200), "]".repeat(200));
        let errs = p(&text).expect_err("refused");
        assert!(
            errs[0].message.contains("nest deeper than 64 levels"),
            "{}",
            errs[0].message
        );
        assert!(p(&format!("a: {}{}\n", "[".repeat(30), "]".repeat(30))).is_ok());
    }

    #[test]
    fn plain_scalars_are_typed_for_json_quoted_stay_strings() {
        let n = p("a: [1, 2.5, true, '3', NO, ~, 1e3]").expect("parse");
        assert_eq!(
            n.to_json(),
            serde_json::json!({"a": [1, 2.5, true, "3", "NO", null, 1000.0]})
        );
    }
}
