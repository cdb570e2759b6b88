//! Seeded, portable random streams split deterministically from one run seed.
//!
//! Every random draw in Sightline comes from [`Stream`], the xoshiro256++ generator shipped with
//! `rand` (Blackman & Vigna, ACM TOMS 47(4), 2021): a fixed, documented algorithm whose output does
//! not depend on the platform or the thread count. Independent streams (one per Monte Carlo run,
//! per filter, per step and per block of particles) are keyed by a tuple of integers mixed with
//! SplitMix64 (Steele, Lea & Flood, OOPSLA 2014), so any stream can be reproduced on its own.

use rand::SeedableRng;
use rand::rngs::Xoshiro256PlusPlus;

/// The generator behind every random draw.
pub type Stream = Xoshiro256PlusPlus;

/// One round of the SplitMix64 finaliser: a bijective mix of 64 bits.
pub fn splitmix64(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Derives a sub-seed from a seed and a path of keys (run index, step, block, ...).
///
/// ```
/// use sightline_core::rng::derive_seed;
/// assert_eq!(derive_seed(7, &[1, 2]), derive_seed(7, &[1, 2]));
/// assert_ne!(derive_seed(7, &[1, 2]), derive_seed(7, &[2, 1]));
/// ```
pub fn derive_seed(seed: u64, keys: &[u64]) -> u64 {
    keys.iter()
        .fold(splitmix64(seed), |acc, &k| splitmix64(acc ^ splitmix64(k)))
}

/// A stream for `seed` and the key path `keys`.
pub fn stream(seed: u64, keys: &[u64]) -> Stream {
    Stream::seed_from_u64(derive_seed(seed, keys))
}
