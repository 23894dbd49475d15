//! Storage containers for raw fixed-point words.

/// A signed integer container for a raw word: `i8`, `i16` or `i32`.
pub trait Word: Copy + Default + PartialOrd + Ord + core::fmt::Debug {
    /// Container bits.
    const BITS: u32;
    /// The raw value, sign-extended.
    fn get(self) -> i64;
    /// A container holding `v`, which the caller has already fitted into the word.
    fn put(v: i64) -> Self;
}

macro_rules! word {
    ($t:ty) => {
        impl Word for $t {
            const BITS: u32 = <$t>::BITS;
            #[inline(always)]
            fn get(self) -> i64 {
                i64::from(self)
            }
            #[inline(always)]
            fn put(v: i64) -> Self {
                v as $t
            }
        }
    };
}
word!(i8);
word!(i16);
word!(i32);
