//! Storage containers for raw fixed-point words.

/// A signed integer container for a raw word: `i8`, `i16` or `i32`.
pub trait Word: Copy + Default + PartialOrd + Ord + core::fmt::Debug {
    /// Container bits.
    const BITS: u32;
    /// The raw value, sign-extended.
    fn get(self) -> i64;
    /// A container holding `v`, which the caller has already fitted into the word.
    fn put(v: i64) -> Self;
    /// The raw value in 32 bits (every container fits).
    fn get32(self) -> i32;
    /// A container holding `v`, which the caller has already fitted into the word.
    fn put32(v: i32) -> Self;
    /// The exact product of two raw values.
    fn product(self, other: Self) -> i64;
}

macro_rules! word {
    ($t:ty, $wide:ty) => {
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
            #[inline(always)]
            fn get32(self) -> i32 {
                i32::from(self)
            }
            #[inline(always)]
            fn put32(v: i32) -> Self {
                v as $t
            }
            #[inline(always)]
            fn product(self, other: Self) -> i64 {
                i64::from(<$wide>::from(self) * <$wide>::from(other))
            }
        }
    };
}
// The product type: the narrowest that holds any product of two words exactly.
word!(i8, i16);
word!(i16, i32);
word!(i32, i64);
