//! Fixed capacities and the one way to fill them.
//!
//! The core keeps its hot paths free of allocation, so its collections are
//! `heapless` vectors, deques and strings with a capacity fixed at compile
//! time. A push onto such a collection fails when it is full; ignoring that
//! failure loses data without a word. The rule of this crate is therefore:
//!
//! - every push onto a bounded collection is **checked**: it is written
//!   `push_within(x, "what")?` and the [`Full`] error reaches the caller as
//!   a typed error (each module's error enum carries a variant holding
//!   `Full`), so the user learns which capacity was exceeded and its limit;
//! - or the bound is **proven by construction** and the code is written as a
//!   conversion that cannot drop anything: a fixed array filled through a
//!   zip, a conversion such as `from_slice`/`try_from` whose `Result` is
//!   the check, or a collection collected from a source whose own type
//!   bounds it by the capacity (a vector of the same capacity, an array of
//!   that length), with a comment saying why it fits;
//! - never a push whose `Result` is bound to `_` and dropped. The test at
//!   the end of this module scans the crate's own source and fails, naming
//!   file and line, on any `let _ =` line that discards a push.
//!
//! Capacities that a configuration can exceed are also refused when the
//! configuration is validated, with the limit named, so a running monitor
//! meets `Full` only through a fault in the program, never through input.

use heapless::{Deque, String as HString, Vec as HVec};

/// A bounded collection had no room for one more element.
///
/// `what` names the elements in the user's words ("layers", "probes"),
/// `limit` is the capacity that was reached.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
#[error("more than {limit} {what} (a fixed capacity of wallflux)")]
pub struct Full {
    /// What the collection holds, plural, in the user's words.
    pub what: &'static str,
    /// The fixed capacity that was reached.
    pub limit: usize,
}

/// A checked push: on a full collection it returns [`Full`] naming `what`
/// and the capacity, instead of handing the element back to be dropped.
pub trait PushWithin<T> {
    /// Appends `x`, or returns [`Full`] when there is no room.
    fn push_within(&mut self, x: T, what: &'static str) -> Result<(), Full>;
}

impl<T, const N: usize> PushWithin<T> for HVec<T, N> {
    fn push_within(&mut self, x: T, what: &'static str) -> Result<(), Full> {
        self.push(x).map_err(|_| Full { what, limit: N })
    }
}

impl<T, const N: usize> PushWithin<T> for Deque<T, N> {
    fn push_within(&mut self, x: T, what: &'static str) -> Result<(), Full> {
        self.push_back(x).map_err(|_| Full { what, limit: N })
    }
}

/// For strings the limit is counted in bytes of UTF-8.
impl<const N: usize> PushWithin<&str> for HString<N> {
    fn push_within(&mut self, x: &str, what: &'static str) -> Result<(), Full> {
        self.push_str(x).map_err(|_| Full { what, limit: N })
    }
}

/// For strings the limit is counted in bytes of UTF-8.
impl<const N: usize> PushWithin<char> for HString<N> {
    fn push_within(&mut self, x: char, what: &'static str) -> Result<(), Full> {
        self.push(x).map_err(|_| Full { what, limit: N })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::path::{Path, PathBuf};

    /// What a discarded result starts with.
    const DISCARD: &str = "let _ =";

    #[test]
    fn vec_push_within_fills_to_capacity_then_names_the_limit() {
        let mut v: HVec<u8, 4> = HVec::new();
        for i in 0..4 {
            assert_eq!(v.push_within(i, "probes"), Ok(()));
        }
        assert_eq!(
            v.push_within(9, "probes"),
            Err(Full {
                what: "probes",
                limit: 4
            })
        );
        assert_eq!(v.as_slice(), &[0, 1, 2, 3], "the full vector is unchanged");
    }

    #[test]
    fn deque_push_within_fills_to_capacity_then_names_the_limit() {
        let mut d: Deque<u8, 3> = Deque::new();
        for i in 0..3 {
            d.push_within(i, "samples").unwrap();
        }
        let err = d.push_within(7, "samples").unwrap_err();
        assert_eq!((err.what, err.limit), ("samples", 3));
        assert_eq!(d.len(), 3);
    }

    #[test]
    fn string_push_within_counts_bytes() {
        let mut s: HString<4> = HString::new();
        s.push_within("ab", "name bytes").unwrap();
        s.push_within('c', "name bytes").unwrap();
        // 'é' takes two bytes of UTF-8 and only one is left.
        let err = s.push_within('é', "name bytes").unwrap_err();
        assert_eq!(err.limit, 4);
        assert_eq!(s.as_str(), "abc");
        assert!(s.push_within("xy", "name bytes").is_err());
    }

    #[test]
    fn full_message_names_what_and_limit() {
        let e = Full {
            what: "layers",
            limit: 8,
        };
        assert_eq!(
            e.to_string(),
            "more than 8 layers (a fixed capacity of wallflux)"
        );
    }

    fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
        let entries = std::fs::read_dir(dir).unwrap_or_else(|e| panic!("{}: {e}", dir.display()));
        for entry in entries {
            let path = entry.expect("directory entry").path();
            if path.is_dir() {
                rust_files(&path, out);
            } else if path.extension().is_some_and(|x| x == "rs") {
                out.push(path);
            }
        }
    }

    /// The lines of `text` that discard the result of a push.
    fn silent_pushes(text: &str) -> Vec<usize> {
        text.lines()
            .enumerate()
            .filter(|(_, line)| {
                line.contains(DISCARD) && (line.contains(".push") || line.contains("push_back"))
            })
            .map(|(i, _)| i + 1)
            .collect()
    }

    #[test]
    fn the_scan_finds_a_silent_push() {
        let sample = [
            "fn f() {",
            &format!("    {DISCARD} v.push(1);"),
            "    v.push_within(2, \"x\")?;",
            &format!("    {DISCARD} s.push_str(\"a\");"),
            &format!("    {DISCARD} q.push_back(3);"),
            "}",
        ]
        .join("\n");
        assert_eq!(silent_pushes(&sample), vec![2, 4, 5]);
    }

    #[test]
    fn no_push_in_the_core_is_silently_dropped() {
        let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
        let mut files = Vec::new();
        rust_files(&src, &mut files);
        files.sort();
        assert!(files.len() > 10, "the scan found the core's sources");
        let mut found = Vec::new();
        for file in &files {
            let text = std::fs::read_to_string(file).expect("readable source");
            for line in silent_pushes(&text) {
                let shown = file.strip_prefix(&src).unwrap_or(file).display();
                found.push(format!("src/{shown}:{line}"));
            }
        }
        assert!(
            found.is_empty(),
            "pushes whose failure is ignored (use push_within(..)?):\n{}",
            found.join("\n")
        );
    }
}
