//! One string table per enum.
//!
//! Every enum a user meets (in the config file, a payload, a log line,
//! `check` output or an error message) is declared with [`word_enum!`],
//! which takes each variant's word once and derives from that one table:
//! `name()`, `from_name()`, the list of all words for error messages,
//! `Display`, and serde's `Serialize`/`Deserialize`. No other spelling of
//! the variants exists, so no Rust `Debug` name can reach a user by way of
//! a forgotten match arm.

use core::fmt;

/// The words of an enum, listed for a person: `"a, b or c"`.
#[derive(Clone, Copy)]
pub struct Choices(pub &'static [&'static str]);

impl fmt::Display for Choices {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let n = self.0.len();
        for (i, w) in self.0.iter().enumerate() {
            if i > 0 {
                f.write_str(if i + 1 == n { " or " } else { ", " })?;
            }
            f.write_str(w)?;
        }
        Ok(())
    }
}

/// What [`word_enum!`] gives every enum, for code generic over them
/// (config validation picks any enum's word the same way).
pub trait Word: Sized + Copy + 'static {
    /// Every variant's word, in declaration order.
    const WORDS: &'static [&'static str];
    /// The variant's word.
    fn word(self) -> &'static str;
    /// The variant whose word is `s`, if any.
    fn from_word(s: &str) -> Option<Self>;
    /// All words listed for an error message (`"a, b or c"`).
    fn word_choices() -> Choices {
        Choices(Self::WORDS)
    }
}

/// Declares a field-less enum whose variants each carry their word:
///
/// ```
/// mod door {
///     wallflux_core::word_enum! {
///         /// How a door is.
///         #[derive(Debug, Clone, Copy, PartialEq, Eq)]
///         pub enum Door { Open = "open", Closed = "closed" }
///     }
/// }
/// use door::Door;
/// assert_eq!(Door::Open.name(), "open");
/// assert_eq!(Door::from_name("closed"), Some(Door::Closed));
/// assert_eq!(Door::choices().to_string(), "open or closed");
/// assert_eq!(serde_json::to_string(&Door::Open).unwrap(), "\"open\"");
/// ```
#[macro_export]
macro_rules! word_enum {
    (
        $(#[$meta:meta])*
        $vis:vis enum $name:ident {
            $( $(#[$vmeta:meta])* $variant:ident = $word:literal ),+ $(,)?
        }
    ) => {
        $(#[$meta])*
        $vis enum $name {
            $( $(#[$vmeta])* $variant ),+
        }

        impl $name {
            /// Every variant, in declaration order.
            pub const ALL: &'static [$name] = &[$($name::$variant),+];
            /// Every variant's word, in declaration order.
            pub const WORDS: &'static [&'static str] = &[$($word),+];

            /// The variant's word: in the config file, payloads and logs.
            pub const fn name(self) -> &'static str {
                match self {
                    $($name::$variant => $word),+
                }
            }

            /// The variant whose word is `s`, if any.
            pub fn from_name(s: &str) -> Option<Self> {
                match s {
                    $($word => Some($name::$variant),)+
                    _ => None,
                }
            }

            /// All words listed for an error message (`"a, b or c"`).
            pub const fn choices() -> $crate::words::Choices {
                $crate::words::Choices(Self::WORDS)
            }
        }

        impl $crate::words::Word for $name {
            const WORDS: &'static [&'static str] = $name::WORDS;
            fn word(self) -> &'static str {
                self.name()
            }
            fn from_word(s: &str) -> Option<Self> {
                Self::from_name(s)
            }
        }

        impl ::core::fmt::Display for $name {
            fn fmt(&self, f: &mut ::core::fmt::Formatter<'_>) -> ::core::fmt::Result {
                f.write_str(self.name())
            }
        }

        impl ::serde::Serialize for $name {
            fn serialize<S: ::serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
                s.serialize_str(self.name())
            }
        }

        impl<'de> ::serde::Deserialize<'de> for $name {
            fn deserialize<D: ::serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
                struct Words;
                impl ::serde::de::Visitor<'_> for Words {
                    type Value = $name;
                    fn expecting(&self, f: &mut ::core::fmt::Formatter<'_>) -> ::core::fmt::Result {
                        write!(f, "one of {}", $name::choices())
                    }
                    fn visit_str<E: ::serde::de::Error>(self, s: &str) -> Result<$name, E> {
                        $name::from_name(s)
                            .ok_or_else(|| E::unknown_variant(s, $name::WORDS))
                    }
                }
                d.deserialize_str(Words)
            }
        }
    };
}

#[cfg(test)]
mod tests {
    use super::Choices;

    crate::word_enum! {
        #[derive(Debug, Clone, Copy, PartialEq, Eq)]
        enum Sample { One = "one", TwoWords = "two_words", Three = "three" }
    }

    #[test]
    fn the_table_drives_every_spelling() {
        for &v in Sample::ALL {
            assert_eq!(Sample::from_name(v.name()), Some(v));
            assert_eq!(v.to_string(), v.name());
            let json = serde_json::to_string(&v).unwrap();
            assert_eq!(json, format!("\"{}\"", v.name()));
            assert_eq!(serde_json::from_str::<Sample>(&json).unwrap(), v);
        }
        assert_eq!(Sample::TwoWords.name(), "two_words");
        assert_eq!(Sample::from_name("TwoWords"), None);
        assert_eq!(Sample::choices().to_string(), "one, two_words or three");
        assert_eq!(Choices(&["a"]).to_string(), "a");
        assert_eq!(Choices(&["a", "b"]).to_string(), "a or b");
        let err = serde_json::from_str::<Sample>("\"four\"")
            .unwrap_err()
            .to_string();
        assert!(err.contains("four") && err.contains("two_words"), "{err}");
    }
}
