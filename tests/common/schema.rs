//! A JSON Schema validator for the subset that `docs/schema/*.json` uses,
//! so that the payload tests need no schema crate (DEVELOPERS.md says why).
//!
//! Keywords: `type` (one or a list), `enum`, `const`, `properties`,
//! `required`, `additionalProperties` (`false` or a schema), `items`,
//! `minItems`, `maxItems`, `minimum`, `maximum`, `exclusiveMinimum`,
//! `minLength`, `maxLength` (characters), `pattern` (only
//! `^[class]{m,n}$`, `^[class]*$`, `^[class]+$`, the class possibly
//! negated), `format: "date-time"` (RFC 3339, asserted), `oneOf`, and
//! `$ref` to `#/$defs/…` of the same file. Annotations (`$schema`, `$id`,
//! `$defs`, `$comment`, `title`, `description`, `examples`) are skipped.
//! Any other keyword is an error of the schema: nothing a schema says is
//! silently ignored.
//!
//! Every `$ref` that matched is recorded, so a test can show that each
//! alternative of a schema met a real payload.

use std::collections::BTreeSet;

use serde_json::{Map, Value};

/// One schema file, loaded.
pub struct Schema {
    /// The file's name (for messages and coverage).
    pub name: String,
    root: Value,
}

/// Where a payload breaks its schema: the JSON pointer of the value and
/// what is wrong with it.
#[derive(Debug, Clone, PartialEq)]
pub struct Violation {
    pub at: String,
    pub what: String,
}

impl std::fmt::Display for Violation {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let at = if self.at.is_empty() { "/" } else { &self.at };
        write!(f, "{at}: {}", self.what)
    }
}

const ANNOTATIONS: [&str; 7] = [
    "$schema",
    "$id",
    "$defs",
    "$comment",
    "title",
    "description",
    "examples",
];

impl Schema {
    pub fn new(name: &str, root: Value) -> Schema {
        Schema {
            name: name.to_string(),
            root,
        }
    }

    /// Reads `docs/schema/{name}` of this repository.
    pub fn load(name: &str) -> Schema {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("docs/schema")
            .join(name);
        let text =
            std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
        let root =
            serde_json::from_str(&text).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
        Schema::new(name, root)
    }

    /// Checks `v`; every violation found (empty: it conforms). `refs`
    /// gathers `{file}#/$defs/{name}` of every `$ref` that matched.
    pub fn check(&self, v: &Value, refs: &mut BTreeSet<String>) -> Vec<Violation> {
        let mut out = Vec::new();
        self.walk(&self.root, v, "", &mut out, refs);
        out
    }

    /// [`Schema::check`] as a result, the violations in one message.
    pub fn validate(&self, v: &Value, refs: &mut BTreeSet<String>) -> Result<(), String> {
        let found = self.check(v, refs);
        if found.is_empty() {
            return Ok(());
        }
        let list: Vec<String> = found.iter().map(ToString::to_string).collect();
        Err(format!("{}: {}", self.name, list.join("; ")))
    }

    fn walk(
        &self,
        s: &Value,
        v: &Value,
        at: &str,
        out: &mut Vec<Violation>,
        refs: &mut BTreeSet<String>,
    ) {
        let s = match s {
            Value::Bool(true) => return,
            Value::Bool(false) => return bad(out, at, "no value is allowed here".into()),
            Value::Object(s) => s,
            other => panic!("{}: a schema must be an object, found {other}", self.name),
        };
        for (key, arg) in s {
            match key.as_str() {
                k if ANNOTATIONS.contains(&k) => {}
                "$ref" => self.reference(arg, v, at, out, refs),
                "type" => {
                    let names: Vec<&str> = match arg {
                        Value::String(t) => vec![t.as_str()],
                        Value::Array(ts) => ts.iter().map(|t| text(t, "type")).collect(),
                        _ => panic!("{}: type must be a name or a list", self.name),
                    };
                    if !names.iter().any(|t| is_type(v, t)) {
                        bad(
                            out,
                            at,
                            format!("{} is not {}", kind(v), names.join(" or ")),
                        );
                    }
                }
                "enum" => {
                    let list = arg.as_array().expect("enum is a list");
                    if !list.contains(v) {
                        bad(out, at, format!("{v} is not one of {arg}"));
                    }
                }
                "const" => {
                    if v != arg {
                        bad(out, at, format!("{v} is not {arg}"));
                    }
                }
                "properties" | "required" | "additionalProperties" => {
                    if key == "properties" {
                        self.object(s, v, at, out, refs);
                    } else if !s.contains_key("properties") {
                        panic!("{}: {key} without properties", self.name);
                    }
                }
                "items" => {
                    if let Value::Array(items) = v {
                        for (i, item) in items.iter().enumerate() {
                            self.walk(arg, item, &format!("{at}/{i}"), out, refs);
                        }
                    }
                }
                "minItems" | "maxItems" => {
                    if let Value::Array(items) = v {
                        let n = arg.as_u64().expect("a count") as usize;
                        let ok = if key == "minItems" {
                            items.len() >= n
                        } else {
                            items.len() <= n
                        };
                        if !ok {
                            bad(out, at, format!("{} items, {key} is {n}", items.len()));
                        }
                    }
                }
                "minimum" | "maximum" | "exclusiveMinimum" => {
                    if let Some(x) = v.as_f64() {
                        let bound = arg.as_f64().expect("a number");
                        let ok = match key.as_str() {
                            "minimum" => x >= bound,
                            "maximum" => x <= bound,
                            _ => x > bound,
                        };
                        if !ok {
                            bad(out, at, format!("{x} is outside {key} {bound}"));
                        }
                    }
                }
                "minLength" | "maxLength" => {
                    if let Value::String(t) = v {
                        let n = arg.as_u64().expect("a length") as usize;
                        let len = t.chars().count();
                        let ok = if key == "minLength" {
                            len >= n
                        } else {
                            len <= n
                        };
                        if !ok {
                            bad(out, at, format!("{len} characters, {key} is {n}"));
                        }
                    }
                }
                "pattern" => {
                    if let Value::String(t) = v {
                        let p = Pattern::parse(text(arg, "pattern"))
                            .unwrap_or_else(|e| panic!("{}: pattern {arg}: {e}", self.name));
                        if !p.matches(t) {
                            bad(out, at, format!("{v} does not match {arg}"));
                        }
                    }
                }
                "format" => {
                    let f = text(arg, "format");
                    assert_eq!(f, "date-time", "{}: format {f} is not supported", self.name);
                    if let Value::String(t) = v {
                        if !is_rfc3339(t) {
                            bad(out, at, format!("{v} is not an RFC 3339 date-time"));
                        }
                    }
                }
                "oneOf" => {
                    let alts = arg.as_array().expect("oneOf is a list");
                    let mut matched = Vec::new();
                    let mut why = Vec::new();
                    for (i, alt) in alts.iter().enumerate() {
                        let mut seen = BTreeSet::new();
                        let mut inner = Vec::new();
                        self.walk(alt, v, at, &mut inner, &mut seen);
                        if inner.is_empty() {
                            matched.push((i, seen));
                        } else {
                            let first = inner[0].to_string();
                            why.push(format!("[{i}] {first}"));
                        }
                    }
                    match matched.len() {
                        1 => refs.extend(matched.pop().unwrap().1),
                        0 => bad(
                            out,
                            at,
                            format!("matches no alternative: {}", why.join("; ")),
                        ),
                        n => bad(out, at, format!("matches {n} alternatives, not one")),
                    }
                }
                other => panic!(
                    "{}: the keyword {other} is not supported by this validator",
                    self.name
                ),
            }
        }
    }

    fn reference(
        &self,
        arg: &Value,
        v: &Value,
        at: &str,
        out: &mut Vec<Violation>,
        refs: &mut BTreeSet<String>,
    ) {
        let r = text(arg, "$ref");
        let name = r
            .strip_prefix("#/$defs/")
            .unwrap_or_else(|| panic!("{}: only #/$defs/… references: {r}", self.name));
        let target = self
            .root
            .get("$defs")
            .and_then(|d| d.get(name))
            .unwrap_or_else(|| panic!("{}: no $defs/{name}", self.name));
        let before = out.len();
        self.walk(target, v, at, out, refs);
        if out.len() == before {
            refs.insert(format!("{}{r}", self.name));
        }
    }

    fn object(
        &self,
        s: &Map<String, Value>,
        v: &Value,
        at: &str,
        out: &mut Vec<Violation>,
        refs: &mut BTreeSet<String>,
    ) {
        let Value::Object(obj) = v else { return };
        let props = s["properties"]
            .as_object()
            .expect("properties is an object");
        if let Some(req) = s.get("required") {
            for r in req.as_array().expect("required is a list") {
                let r = text(r, "required");
                assert!(
                    props.contains_key(r),
                    "{}: {r} is required but not among the properties",
                    self.name
                );
                if !obj.contains_key(r) {
                    bad(out, at, format!("the field \"{r}\" is missing"));
                }
            }
        }
        for (k, item) in obj {
            let here = format!("{at}/{k}");
            match (props.get(k), s.get("additionalProperties")) {
                (Some(p), _) => self.walk(p, item, &here, out, refs),
                (None, Some(extra)) => {
                    if extra == &Value::Bool(false) {
                        bad(out, &here, "a field the schema does not know".into());
                    } else {
                        self.walk(extra, item, &here, out, refs);
                    }
                }
                (None, None) => {}
            }
        }
    }
}

fn bad(out: &mut Vec<Violation>, at: &str, what: String) {
    out.push(Violation {
        at: at.to_string(),
        what,
    });
}

fn text<'a>(v: &'a Value, what: &str) -> &'a str {
    v.as_str()
        .unwrap_or_else(|| panic!("{what} must be text, found {v}"))
}

fn kind(v: &Value) -> &'static str {
    match v {
        Value::Null => "null",
        Value::Bool(_) => "a boolean",
        Value::Number(_) => "a number",
        Value::String(_) => "a string",
        Value::Array(_) => "an array",
        Value::Object(_) => "an object",
    }
}

fn is_type(v: &Value, t: &str) -> bool {
    match t {
        "null" => v.is_null(),
        "boolean" => v.is_boolean(),
        "number" => v.is_number(),
        // As JSON Schema counts: any number without a fraction (2.0 too).
        "integer" => v.is_i64() || v.is_u64() || v.as_f64().is_some_and(|x| x.fract() == 0.0),
        "string" => v.is_string(),
        "array" => v.is_array(),
        "object" => v.is_object(),
        other => panic!("unknown type {other}"),
    }
}

/// RFC 3339 `date-time`: `YYYY-MM-DDTHH:MM:SS[.frac](Z|±HH:MM)`, `T` and
/// `Z` in either case, fields in their ranges (a leap second's 60 allowed).
pub fn is_rfc3339(t: &str) -> bool {
    let b = t.as_bytes();
    let digits = |r: std::ops::Range<usize>| -> Option<u32> {
        let s = b.get(r)?;
        s.iter()
            .all(u8::is_ascii_digit)
            .then(|| std::str::from_utf8(s).ok()?.parse().ok())?
    };
    let (Some(y), Some(mo), Some(d), Some(h), Some(mi), Some(s)) = (
        digits(0..4),
        digits(5..7),
        digits(8..10),
        digits(11..13),
        digits(14..16),
        digits(17..19),
    ) else {
        return false;
    };
    if b[4] != b'-'
        || b[7] != b'-'
        || !matches!(b[10], b'T' | b't')
        || b[13] != b':'
        || b[16] != b':'
    {
        return false;
    }
    let leap = y % 4 == 0 && (y % 100 != 0 || y % 400 == 0);
    let days = match mo {
        1 | 3 | 5 | 7 | 8 | 10 | 12 => 31,
        4 | 6 | 9 | 11 => 30,
        2 if leap => 29,
        2 => 28,
        _ => return false,
    };
    if d == 0 || d > days || h > 23 || mi > 59 || s > 60 {
        return false;
    }
    let mut i = 19;
    if b.get(i) == Some(&b'.') {
        i += 1;
        let start = i;
        while b.get(i).is_some_and(u8::is_ascii_digit) {
            i += 1;
        }
        if i == start {
            return false;
        }
    }
    match b.get(i) {
        Some(b'Z' | b'z') => i + 1 == b.len(),
        Some(b'+' | b'-') => {
            i + 6 == b.len()
                && b[i + 3] == b':'
                && digits(i + 1..i + 3).is_some_and(|h| h <= 23)
                && digits(i + 4..i + 6).is_some_and(|m| m <= 59)
        }
        _ => false,
    }
}

/// The one shape of `pattern` supported: a whole string of characters
/// from one class, `^[class]{m,n}$` (also `*`, `+`, `{n}`), the class
/// possibly negated (`[^…]`), its members single characters or ranges
/// `a-z`, written as themselves or as `\uXXXX`, `\-`, `\\`, `\]`.
#[derive(Debug, Clone, PartialEq)]
pub struct Pattern {
    negated: bool,
    ranges: Vec<(char, char)>,
    min: usize,
    max: Option<usize>,
}

impl Pattern {
    pub fn parse(p: &str) -> Result<Pattern, String> {
        let body = p
            .strip_prefix("^[")
            .and_then(|r| r.strip_suffix('$'))
            .ok_or("not of the form ^[…]…$")?;
        let mut chars = body.chars().peekable();
        let negated = chars.next_if_eq(&'^').is_some();
        let mut members = Vec::new();
        loop {
            let c = match chars.next().ok_or("the class is not closed")? {
                ']' => break,
                '\\' => match chars.next().ok_or("an escape at the end")? {
                    'u' => {
                        let hex: String = (0..4).filter_map(|_| chars.next()).collect();
                        let n = u32::from_str_radix(&hex, 16).map_err(|_| "a bad \\u escape")?;
                        char::from_u32(n).ok_or("\\u of no character")?
                    }
                    e @ ('-' | '\\' | ']' | '^') => e,
                    e => return Err(format!("the escape \\{e} is not supported")),
                },
                c => c,
            };
            members.push(c);
            // A `-` between two members makes a range (written as the
            // marker char::MAX, never itself a member).
            if chars.peek() == Some(&'-') {
                let mut ahead = chars.clone();
                ahead.next();
                if ahead.peek().is_some_and(|&n| n != ']') {
                    chars.next();
                    members.push(char::MAX);
                }
            }
        }
        let mut ranges = Vec::new();
        let mut i = 0;
        while i < members.len() {
            if members.get(i + 1) == Some(&char::MAX) {
                let (a, z) = (
                    members[i],
                    *members.get(i + 2).ok_or("a range without end")?,
                );
                if a > z {
                    return Err(format!("the range {a}-{z} is reversed"));
                }
                ranges.push((a, z));
                i += 3;
            } else {
                ranges.push((members[i], members[i]));
                i += 1;
            }
        }
        let rest: String = chars.collect();
        let (min, max) = match rest.as_str() {
            "*" => (0, None),
            "+" => (1, None),
            q => {
                let inner = q
                    .strip_prefix('{')
                    .and_then(|r| r.strip_suffix('}'))
                    .ok_or_else(|| format!("the quantifier {q:?} is not supported"))?;
                let num = |s: &str| s.parse::<usize>().map_err(|_| format!("bad count in {q}"));
                match inner.split_once(',') {
                    Some((a, b)) => (num(a)?, Some(num(b)?)),
                    None => (num(inner)?, Some(num(inner)?)),
                }
            }
        };
        Ok(Pattern {
            negated,
            ranges,
            min,
            max,
        })
    }

    pub fn matches(&self, t: &str) -> bool {
        let n = t.chars().count();
        let member = |c: char| self.ranges.iter().any(|&(a, z)| (a..=z).contains(&c));
        n >= self.min
            && self.max.is_none_or(|m| n <= m)
            && t.chars().all(|c| member(c) != self.negated)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    fn errors(schema: Value, v: Value) -> Vec<String> {
        let mut refs = BTreeSet::new();
        Schema::new("t.json", schema)
            .check(&v, &mut refs)
            .iter()
            .map(ToString::to_string)
            .collect()
    }

    #[test]
    fn types_nullable_and_integers() {
        let s = json!({"type": ["number", "null"]});
        assert!(errors(s.clone(), json!(1.5)).is_empty());
        assert!(errors(s.clone(), json!(null)).is_empty());
        assert_eq!(
            errors(s, json!("1.5")),
            ["/: a string is not number or null"]
        );
        let i = json!({"type": "integer"});
        assert!(errors(i.clone(), json!(3)).is_empty());
        assert!(errors(i.clone(), json!(3.0)).is_empty());
        assert_eq!(errors(i, json!(3.5)).len(), 1);
    }

    #[test]
    fn closed_objects_name_the_missing_and_the_unknown_field() {
        let s = json!({
            "type": "object",
            "properties": {"a": {"type": "string"}, "b": {"type": "boolean"}},
            "required": ["a"],
            "additionalProperties": false
        });
        assert!(errors(s.clone(), json!({"a": "x"})).is_empty());
        assert_eq!(
            errors(s.clone(), json!({"b": true, "c": 1})),
            [
                "/: the field \"a\" is missing",
                "/c: a field the schema does not know"
            ]
        );
        assert_eq!(errors(s, json!({"a": 1})), ["/a: a number is not string"]);
    }

    #[test]
    fn enum_const_bounds_lengths_and_items() {
        assert_eq!(
            errors(json!({"enum": ["ok", "open"]}), json!("spike")).len(),
            1
        );
        assert!(errors(json!({"const": true}), json!(true)).is_empty());
        assert_eq!(errors(json!({"const": true}), json!(false)).len(), 1);
        let n = json!({"exclusiveMinimum": 0, "maximum": 1440});
        assert!(errors(n.clone(), json!(30)).is_empty());
        assert_eq!(errors(n.clone(), json!(0)).len(), 1);
        assert_eq!(errors(n, json!(1441)).len(), 1);
        let t = json!({"minLength": 1, "maxLength": 3});
        assert!(
            errors(t.clone(), json!("äöü")).is_empty(),
            "characters, not bytes"
        );
        assert_eq!(errors(t.clone(), json!("")).len(), 1);
        assert_eq!(errors(t, json!("abcd")).len(), 1);
        let a = json!({"type": "array", "items": {"type": "number"}, "maxItems": 2});
        assert_eq!(
            errors(a.clone(), json!([1, "x"])),
            ["/1: a string is not number"]
        );
        assert_eq!(errors(a, json!([1, 2, 3])).len(), 1);
    }

    #[test]
    fn one_of_wants_exactly_one_and_records_its_reference() {
        let s = json!({
            "oneOf": [{"$ref": "#/$defs/t"}, {"$ref": "#/$defs/f"}],
            "$defs": {"t": {"const": true}, "f": {"type": "boolean"}}
        });
        let schema = Schema::new("s.json", s);
        let mut refs = BTreeSet::new();
        assert!(schema.check(&json!(false), &mut refs).is_empty());
        assert_eq!(refs.into_iter().collect::<Vec<_>>(), ["s.json#/$defs/f"]);
        let mut refs = BTreeSet::new();
        let both = schema.check(&json!(true), &mut refs);
        assert_eq!(both.len(), 1, "true is both: {both:?}");
        assert!(refs.is_empty());
        assert_eq!(schema.check(&json!(1), &mut refs).len(), 1);
    }

    #[test]
    #[should_panic(expected = "not supported")]
    fn an_unknown_keyword_is_refused_not_ignored() {
        errors(json!({"patternProperties": {}}), json!({}));
    }

    #[test]
    fn rfc3339_date_times() {
        for ok in [
            "2026-12-02T08:15:30.250Z",
            "2026-12-02T08:15:30Z",
            "2024-02-29t23:59:60z",
            "2026-12-02T08:15:30+01:00",
        ] {
            assert!(is_rfc3339(ok), "{ok}");
        }
        for bad in [
            "2026-12-02 08:15:30Z",
            "2026-13-02T08:15:30Z",
            "2025-02-29T08:15:30Z",
            "2026-12-02T24:00:00Z",
            "2026-12-02T08:15:30",
            "2026-12-02T08:15:30.Z",
            "2026-12-02T08:15:30+0100",
            "1764000000",
            "",
        ] {
            assert!(!is_rfc3339(bad), "{bad}");
        }
    }

    #[test]
    fn patterns_of_one_class() {
        let name = Pattern::parse("^[A-Za-z0-9_\\-]{1,48}$").unwrap();
        assert!(name.matches("side-wall_2"));
        assert!(!name.matches(""));
        assert!(!name.matches("a/b") && !name.matches("a+b") && !name.matches("$SYS"));
        assert!(!name.matches(&"a".repeat(49)));
        let printable =
            Pattern::parse("^[^\\u0000-\\u001F\\u007F-\\u009F\\u202A-\\u202E]*$").unwrap();
        assert!(printable.matches("j.smith, shift 2"));
        assert!(!printable.matches("a\u{0007}b"));
        assert!(!printable.matches("evil\u{202E}txt"));
        assert!(printable.matches(""));
        assert!(Pattern::parse("^a+$").is_err());
        assert!(Pattern::parse("^[a-z]?$").is_err());
        assert!(Pattern::parse("^[z-a]*$").is_err());
    }
}
