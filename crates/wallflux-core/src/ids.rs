//! Typed ids of the configured things (sources, channels, zones, alarms)
//! and [`IdVec`], a vector indexed only by its own id type.
//!
//! Ids are minted by the core alone: configuration validation numbers the
//! entries of each [`IdVec`] of [`crate::config::Settings`], and every
//! cross-reference in it (a channel's source, a probe's channel, an alarm's
//! target) is such an id. Indexing an `IdVec` with an id from the same
//! settings therefore cannot fail; [`IdVec::get`] is the checked lookup for
//! an id that may come from other settings. An id of one kind never indexes
//! the collection of another: `channels[zone]` does not compile.

use std::fmt;
use std::marker::PhantomData;
use std::ops::{Index, IndexMut};

/// Proof that the caller is the core: only this crate can build one, so
/// only this crate can call [`Id::mint`].
#[derive(Debug, Clone, Copy)]
pub struct Mint(());

/// An id type: a position in its [`IdVec`], minted by the core.
pub trait Id: Copy + Eq + Ord + std::hash::Hash + fmt::Debug {
    /// The position of the entry (for display and ordering, never for
    /// indexing a plain slice).
    fn index(self) -> usize;

    /// The id of position `index` (the core's alone, see [`Mint`]).
    #[doc(hidden)]
    fn mint(index: usize, _: Mint) -> Self;
}

/// The id of position `index`, minted by the core.
pub(crate) fn mint<I: Id>(index: usize) -> I {
    I::mint(index, Mint(()))
}

/// The id validation gives a reference it could not resolve. It reports a
/// problem with it, so no `Settings` holding this id is ever returned; and
/// [`IdVec::get`] refuses it.
pub(crate) fn unresolved<I: Id>() -> I {
    mint(u32::MAX as usize)
}

macro_rules! id_type {
    ($(#[$doc:meta])* $name:ident) => {
        $(#[$doc])*
        #[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
        pub struct $name(u32);

        impl $name {
            /// The position of the entry (for display and ordering).
            pub fn index(self) -> usize {
                self.0 as usize
            }
        }

        impl Id for $name {
            fn index(self) -> usize {
                $name::index(self)
            }

            fn mint(index: usize, _: Mint) -> Self {
                // A configuration is a text file: four billion entries of
                // one kind would not fit in memory long before this.
                $name(u32::try_from(index).expect(concat!(
                    "more ",
                    stringify!($name),
                    "s than u32 can number"
                )))
            }
        }
    };
}

id_type! {
    /// A `[[source]]` of the configuration.
    SourceId
}
id_type! {
    /// A `[[channel]]` of the configuration.
    ChannelId
}
id_type! {
    /// A `[[zone]]` of the configuration.
    ZoneId
}
id_type! {
    /// An alarm of the configuration (built-in or `[[alarm]]`).
    AlarmId
}

/// A `Vec<T>` indexed only by its id type `I`.
#[derive(Clone, PartialEq)]
pub struct IdVec<I, T> {
    items: Vec<T>,
    id: PhantomData<fn() -> I>,
}

impl<I: Id, T> IdVec<I, T> {
    /// An empty vector.
    pub fn new() -> Self {
        IdVec {
            items: Vec::new(),
            id: PhantomData,
        }
    }

    /// The entry of `id`, or `None` when `id` is not one of this vector's
    /// (an id of a larger collection).
    pub fn get(&self, id: I) -> Option<&T> {
        self.items.get(id.index())
    }

    /// As [`Self::get`], mutably.
    pub fn get_mut(&mut self, id: I) -> Option<&mut T> {
        self.items.get_mut(id.index())
    }

    /// Number of entries.
    pub fn len(&self) -> usize {
        self.items.len()
    }

    /// Whether there are no entries.
    pub fn is_empty(&self) -> bool {
        self.items.is_empty()
    }

    /// The entries, in id order.
    pub fn iter(&self) -> std::slice::Iter<'_, T> {
        self.items.iter()
    }

    /// The entries, mutably, in id order.
    pub fn iter_mut(&mut self) -> std::slice::IterMut<'_, T> {
        self.items.iter_mut()
    }

    /// Every id, in order.
    pub fn ids(&self) -> std::iter::Map<std::ops::Range<usize>, fn(usize) -> I> {
        (0..self.items.len()).map(mint as fn(usize) -> I)
    }

    /// Every entry with its id, in order.
    pub fn iter_ids(&self) -> impl DoubleEndedIterator<Item = (I, &T)> + ExactSizeIterator {
        self.items.iter().enumerate().map(|(i, t)| (mint(i), t))
    }

    /// Every entry, mutably, with its id, in order.
    pub fn iter_ids_mut(&mut self) -> impl Iterator<Item = (I, &mut T)> {
        self.items.iter_mut().enumerate().map(|(i, t)| (mint(i), t))
    }

    /// The id of the first entry that satisfies `f`.
    pub fn position(&self, f: impl FnMut(&T) -> bool) -> Option<I> {
        self.items.iter().position(f).map(mint)
    }

    /// The entries as a slice, in id order.
    pub fn as_slice(&self) -> &[T] {
        &self.items
    }

    /// A vector with an entry per id of `self`, made by `f` (e.g. the
    /// state kept for each configured entry).
    pub fn map<U>(&self, f: impl FnMut(&T) -> U) -> IdVec<I, U> {
        self.items.iter().map(f).collect()
    }

    /// A vector of `n` entries, each made by `f` from its id.
    pub fn from_fn(n: usize, f: impl FnMut(I) -> T) -> Self {
        (0..n).map(mint).map(f).collect()
    }
}

impl<I: Id, T> Default for IdVec<I, T> {
    fn default() -> Self {
        Self::new()
    }
}

impl<I: Id, T> FromIterator<T> for IdVec<I, T> {
    fn from_iter<It: IntoIterator<Item = T>>(iter: It) -> Self {
        IdVec {
            items: iter.into_iter().collect(),
            id: PhantomData,
        }
    }
}

impl<I: Id, T> Index<I> for IdVec<I, T> {
    type Output = T;

    fn index(&self, id: I) -> &T {
        &self.items[id.index()]
    }
}

impl<I: Id, T> IndexMut<I> for IdVec<I, T> {
    fn index_mut(&mut self, id: I) -> &mut T {
        &mut self.items[id.index()]
    }
}

impl<'a, I: Id, T> IntoIterator for &'a IdVec<I, T> {
    type Item = &'a T;
    type IntoIter = std::slice::Iter<'a, T>;

    fn into_iter(self) -> Self::IntoIter {
        self.items.iter()
    }
}

impl<'a, I: Id, T> IntoIterator for &'a mut IdVec<I, T> {
    type Item = &'a mut T;
    type IntoIter = std::slice::IterMut<'a, T>;

    fn into_iter(self) -> Self::IntoIter {
        self.items.iter_mut()
    }
}

impl<I, T: fmt::Debug> fmt::Debug for IdVec<I, T> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_list().entries(&self.items).finish()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ids_number_the_entries_in_order() {
        let v: IdVec<ZoneId, &str> = ["a", "b"].into_iter().collect();
        let (a, b) = (v.ids().next().unwrap(), v.ids().next_back().unwrap());
        assert_eq!((a.index(), b.index()), (0, 1));
        assert!(a < b);
        assert_eq!(v[b], "b");
        assert_eq!(v.ids().collect::<Vec<_>>(), vec![a, b]);
        assert_eq!(
            v.iter_ids().map(|(i, s)| (i, *s)).next_back(),
            Some((b, "b"))
        );
        assert_eq!(v.position(|s| *s == "b"), Some(b));
        assert_eq!(v.position(|s| *s == "c"), None);
    }

    #[test]
    fn an_id_beyond_the_vector_is_refused_by_get() {
        let big: IdVec<ChannelId, u8> = (0..5).collect();
        let small: IdVec<ChannelId, u8> = (0..2).collect();
        let last = big.ids().next_back().unwrap();
        assert_eq!(big.get(last), Some(&4));
        assert_eq!(small.get(last), None);
    }
}
