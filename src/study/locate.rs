//! Where things are in the study file, and the study error type.
//!
//! serde_yaml gives line and column for the errors it finds itself. For errors found after
//! parsing (unknown level, duplicate names, bad geometry files, mismatched atoms) we find the
//! position again with [`locate`]: it walks the YAML once more with the real parser, down a path
//! of keys and list indices, and makes the parser stop with an error *at the target node*; the
//! parser attaches that node's position to the error. No second YAML reader is involved, so
//! positions are exactly what serde_yaml reports for its own errors (flow style, anchors, quoting
//! all behave the same).

use serde::de::{self, DeserializeSeed, IgnoredAny, MapAccess, SeqAccess, Visitor};
use serde::Deserializer;
use std::fmt;

/// One step of a path into the YAML document.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Seg {
    /// The value under this key of a map.
    Key(String),
    /// This element of a list (0-based).
    Index(usize),
    /// The key itself (its `nth` occurrence, 0-based) rather than its value; last step only.
    KeyItself(String, usize),
}

pub fn key(k: &str) -> Seg {
    Seg::Key(k.to_string())
}

/// A line and column, both counted from 1.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Loc {
    pub line: usize,
    pub column: usize,
}

const HERE: &str = "__cairn_located_here__";

/// Position of the node at `path` in `text`, or of its nearest ancestor that exists.
pub fn locate(text: &str, path: &[Seg]) -> Option<Loc> {
    for n in (0..=path.len()).rev() {
        if let Some(l) = locate_exact(text, &path[..n]) {
            return Some(l);
        }
    }
    None
}

/// Position of the node at exactly `path`, None when there is no such node.
pub fn locate_exact(text: &str, path: &[Seg]) -> Option<Loc> {
    let de = serde_yaml::Deserializer::from_str(text);
    match (Seek { path }).deserialize(de) {
        Ok(()) => None,
        Err(e) if e.to_string().contains(HERE) => e.location().map(|l| Loc {
            line: l.line(),
            column: l.column(),
        }),
        Err(_) => None,
    }
}

struct Seek<'a> {
    path: &'a [Seg],
}

impl<'de> DeserializeSeed<'de> for Seek<'_> {
    type Value = ();
    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
        if self.path.is_empty() {
            // Every visit of `Here` fails ("invalid type ... expected HERE"), and the parser
            // stamps the failure with the current node's position.
            d.deserialize_any(Here)
        } else {
            d.deserialize_any(self)
        }
    }
}

struct Here;
impl Visitor<'_> for Here {
    type Value = ();
    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str(HERE)
    }
}

impl<'de> Visitor<'de> for Seek<'_> {
    type Value = ();
    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("anything")
    }
    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<(), A::Error> {
        let (first, rest) = match self.path.split_first() {
            Some(x) => x,
            None => return Ok(()),
        };
        let mut seen = 0usize;
        loop {
            let probe = KeyProbe {
                target: match first {
                    Seg::KeyItself(k, nth) if *nth == seen => Some(k.as_str()),
                    _ => None,
                },
            };
            let k = match map.next_key_seed(probe)? {
                Some(k) => k,
                None => return Ok(()),
            };
            match first {
                Seg::Key(want) if *want == k => map.next_value_seed(Seek { path: rest })?,
                Seg::KeyItself(want, _) if *want == k => {
                    seen += 1;
                    map.next_value::<IgnoredAny>()?;
                }
                _ => {
                    map.next_value::<IgnoredAny>()?;
                }
            }
        }
    }
    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<(), A::Error> {
        let (first, rest) = match self.path.split_first() {
            Some(x) => x,
            None => return Ok(()),
        };
        let mut i = 0;
        loop {
            let more = if *first == Seg::Index(i) {
                seq.next_element_seed(Seek { path: rest })?.is_some()
            } else {
                seq.next_element::<IgnoredAny>()?.is_some()
            };
            if !more {
                return Ok(());
            }
            i += 1;
        }
    }
    fn visit_str<E: de::Error>(self, _: &str) -> Result<(), E> {
        Ok(())
    }
    fn visit_bool<E: de::Error>(self, _: bool) -> Result<(), E> {
        Ok(())
    }
    fn visit_i64<E: de::Error>(self, _: i64) -> Result<(), E> {
        Ok(())
    }
    fn visit_u64<E: de::Error>(self, _: u64) -> Result<(), E> {
        Ok(())
    }
    fn visit_f64<E: de::Error>(self, _: f64) -> Result<(), E> {
        Ok(())
    }
    fn visit_unit<E: de::Error>(self) -> Result<(), E> {
        Ok(())
    }
    fn visit_none<E: de::Error>(self) -> Result<(), E> {
        Ok(())
    }
}

/// Reads a map key as text; fails at the key's own position when it is the target.
struct KeyProbe<'a> {
    target: Option<&'a str>,
}

impl<'de> DeserializeSeed<'de> for KeyProbe<'_> {
    type Value = String;
    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<String, D::Error> {
        d.deserialize_any(self)
    }
}

impl KeyProbe<'_> {
    fn check<E: de::Error>(&self, k: String) -> Result<String, E> {
        if self.target == Some(k.as_str()) {
            Err(E::custom(HERE))
        } else {
            Ok(k)
        }
    }
}

impl Visitor<'_> for KeyProbe<'_> {
    type Value = String;
    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("a key")
    }
    fn visit_str<E: de::Error>(self, v: &str) -> Result<String, E> {
        self.check(v.to_string())
    }
    fn visit_bool<E: de::Error>(self, v: bool) -> Result<String, E> {
        self.check(v.to_string())
    }
    fn visit_i64<E: de::Error>(self, v: i64) -> Result<String, E> {
        self.check(v.to_string())
    }
    fn visit_u64<E: de::Error>(self, v: u64) -> Result<String, E> {
        self.check(v.to_string())
    }
    fn visit_f64<E: de::Error>(self, v: f64) -> Result<String, E> {
        self.check(v.to_string())
    }
    fn visit_unit<E: de::Error>(self) -> Result<String, E> {
        self.check("~".to_string())
    }
}

/// An error in a study file: where (file:line:column), which reaction, which key, what.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StudyError {
    /// The study file as the user named it.
    pub file: String,
    pub loc: Option<Loc>,
    pub reaction: Option<String>,
    /// Dotted key inside the reaction (or from the top of the file), e.g. `options.band.images`.
    pub key: Option<String>,
    pub message: String,
}

impl fmt::Display for StudyError {
    fn fmt(&self, f: &mut fmt::Formatter) -> fmt::Result {
        match self.loc {
            Some(l) => write!(f, "{}:{}:{}: ", self.file, l.line, l.column)?,
            None => write!(f, "{}: ", self.file)?,
        }
        if let Some(r) = &self.reaction {
            write!(f, "reaction \"{r}\": ")?;
        }
        if let Some(k) = &self.key {
            write!(f, "key \"{k}\": ")?;
        }
        f.write_str(&self.message)
    }
}

impl std::error::Error for StudyError {}

impl From<StudyError> for crate::Error {
    fn from(e: StudyError) -> Self {
        crate::Error::Invalid(e.to_string())
    }
}

/// The study text with its name, for making located errors.
pub struct Source {
    pub file: String,
    pub text: String,
}

impl Source {
    /// An error at the node `path` (or its nearest existing ancestor).
    pub fn error(
        &self,
        path: &[Seg],
        reaction: Option<&str>,
        key: Option<&str>,
        message: impl Into<String>,
    ) -> StudyError {
        StudyError {
            file: self.file.clone(),
            loc: locate(&self.text, path),
            reaction: reaction.map(str::to_string),
            key: key.map(str::to_string),
            message: message.into(),
        }
    }

    /// Turn a serde_yaml error (shape errors: unknown key, wrong type...) into a study error
    /// naming the reaction and key.
    pub fn from_yaml(&self, e: &serde_yaml::Error) -> StudyError {
        let loc = e.location().map(|l| Loc {
            line: l.line(),
            column: l.column(),
        });
        let full = e.to_string();
        let text = strip_positions(&full);
        let (path, msg) = split_path(&text);
        let (mut reaction, mut key_prefix) = (None, String::new());
        if let Some(p) = path {
            match reaction_index(p) {
                Some((i, rest)) => {
                    reaction = Some(self.reaction_name(i));
                    key_prefix = human_path(rest);
                }
                None => key_prefix = human_path(p),
            }
        }
        let (key, mut message) = rephrase(&key_prefix, msg);
        if path.is_none()
            && [
                "while parsing",
                "while scanning",
                "did not find expected",
                "mapping values are not allowed",
                "found character",
            ]
            .iter()
            .any(|m| message.contains(m))
        {
            message = format!("YAML syntax error: {message}");
        }
        StudyError {
            file: self.file.clone(),
            loc,
            reaction,
            key: if key.is_empty() { None } else { Some(key) },
            message,
        }
    }

    /// Name of reaction `i` as written, or "#i+1" when it has no readable name.
    pub fn reaction_name(&self, i: usize) -> String {
        let v: Option<serde_yaml::Value> = serde_yaml::from_str(&self.text).ok();
        v.as_ref()
            .and_then(|v| v.get("reactions"))
            .and_then(|r| r.get(i))
            .and_then(|r| r.get("name"))
            .and_then(|n| n.as_str())
            .map(str::to_string)
            .unwrap_or_else(|| format!("#{}", i + 1))
    }
}

/// Remove " at line N column M" (serde_yaml appends these; we print file:line:col instead).
fn strip_positions(s: &str) -> String {
    let re = regex::Regex::new(r",? at line \d+ column \d+").expect("constant regex");
    re.replace_all(s, "").trim().to_string()
}

/// serde_yaml writes "path.to[2].key: message"; split that.
fn split_path(s: &str) -> (Option<&str>, &str) {
    let re = regex::Regex::new(r"^([A-Za-z0-9_\-]+(?:\[\d+\]|\.[A-Za-z0-9_\-]+)*): (.*)$")
        .expect("constant regex");
    match re.captures(s) {
        Some(c) => match (c.get(1), c.get(2)) {
            (Some(p), Some(m)) => (Some(p.as_str()), m.as_str()),
            _ => (None, s),
        },
        None => (None, s),
    }
}

/// `reactions[3].options.band` → (3, "options.band").
fn reaction_index(p: &str) -> Option<(usize, &str)> {
    let rest = p.strip_prefix("reactions[")?;
    let close = rest.find(']')?;
    let i: usize = rest[..close].parse().ok()?;
    let tail = &rest[close + 1..];
    Some((i, tail.strip_prefix('.').unwrap_or(tail)))
}

/// `pipeline[2].band` → `pipeline entry 3.band` (list entries counted from 1 for people).
fn human_path(p: &str) -> String {
    let re = regex::Regex::new(r"\[(\d+)\]").expect("constant regex");
    re.replace_all(p, |c: &regex::Captures| {
        let i: usize = c[1].parse().unwrap_or(0);
        format!(" entry {}", i + 1)
    })
    .to_string()
}

fn join_key(prefix: &str, k: &str) -> String {
    if prefix.is_empty() {
        k.to_string()
    } else {
        format!("{prefix}.{k}")
    }
}

/// Rephrase serde's wording for people who write study files.
fn rephrase(prefix: &str, msg: &str) -> (String, String) {
    let field =
        regex::Regex::new(r"^unknown field `([^`]*)`(?:, expected (.*)|, there are no fields)$")
            .expect("constant regex");
    if let Some(c) = field.captures(msg) {
        let k = c.get(1).map_or("", |m| m.as_str());
        let known = c
            .get(2)
            .map(|m| m.as_str().replace("one of ", "").replace('`', ""))
            .unwrap_or_default();
        let message = if known.is_empty() {
            "unknown key; this place takes no keys".to_string()
        } else {
            format!("unknown key (known keys here: {known})")
        };
        return (join_key(prefix, k), message);
    }
    let missing = regex::Regex::new(r"^missing field `([^`]*)`$").expect("constant regex");
    if let Some(c) = missing.captures(msg) {
        let k = c.get(1).map_or("", |m| m.as_str());
        return (join_key(prefix, k), "missing; this key is required".into());
    }
    let dup = regex::Regex::new(r"^duplicate field `([^`]*)`$").expect("constant regex");
    if let Some(c) = dup.captures(msg) {
        let k = c.get(1).map_or("", |m| m.as_str());
        return (join_key(prefix, k), "given twice; keep one".into());
    }
    let mut m = msg.to_string();
    for (from, to) in [
        ("expected u32", "expected a whole number ≥ 0"),
        ("expected u64", "expected a whole number ≥ 0"),
        ("expected i32", "expected a whole number"),
        ("expected f64", "expected a number"),
        ("expected a boolean", "expected true or false"),
        ("expected a sequence", "expected a list"),
        ("invalid type: ", ""),
        ("invalid value: ", ""),
    ] {
        m = m.replace(from, to);
    }
    (prefix.to_string(), m)
}

#[cfg(test)]
mod tests {
    use super::*;

    const DOC: &str = "\
a: 1
list:
  - x: 1
    y: two
  - {x: 3, y: four}
nested:
  deep:
    key: value
a2: [1, 2, 3]
";

    fn at(path: &[Seg]) -> (usize, usize) {
        let l = locate_exact(DOC, path).expect("found");
        (l.line, l.column)
    }

    #[test]
    fn finds_values_in_block_and_flow_style() {
        assert_eq!(at(&[key("a")]), (1, 4));
        assert_eq!(at(&[key("list"), Seg::Index(0), key("y")]), (4, 8));
        assert_eq!(at(&[key("list"), Seg::Index(1), key("y")]), (5, 15));
        assert_eq!(at(&[key("nested"), key("deep"), key("key")]), (8, 10));
        assert_eq!(at(&[key("a2"), Seg::Index(2)]), (9, 12));
        assert_eq!(at(&[key("list"), Seg::Index(1)]), (5, 5));
    }

    #[test]
    fn finds_keys_themselves_and_falls_back_to_ancestors() {
        assert_eq!(at(&[Seg::KeyItself("a2".into(), 0)]), (9, 1));
        let twice = "k: 1\nm: 2\nk: 3\n";
        let l = locate_exact(twice, &[Seg::KeyItself("k".into(), 1)]).unwrap();
        assert_eq!((l.line, l.column), (3, 1));
        assert_eq!(locate_exact(DOC, &[key("nope")]), None);
        let l = locate(DOC, &[key("nested"), key("deep"), key("nope")]).unwrap();
        assert_eq!((l.line, l.column), (8, 5));
    }

    #[test]
    fn splits_serde_messages() {
        assert_eq!(
            split_path("reactions[2].options: unknown field `x`"),
            (Some("reactions[2].options"), "unknown field `x`")
        );
        assert_eq!(reaction_index("reactions[12].a.b"), Some((12, "a.b")));
        assert_eq!(reaction_index("reactions[0]"), Some((0, "")));
        assert_eq!(human_path("pipeline[2].band"), "pipeline entry 3.band");
        let (k, m) = rephrase(
            "options",
            "unknown field `bnd`, expected one of `band`, `scan`",
        );
        assert_eq!(k, "options.bnd");
        assert_eq!(m, "unknown key (known keys here: band, scan)");
        assert_eq!(
            strip_positions("x: bad at line 3 column 4"),
            "x: bad".to_string()
        );
    }
}
