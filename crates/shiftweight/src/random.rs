//! The one seeded random generator of the crate.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

/// The portable, seeded random generator used for every random choice in the crate (ChaCha with
/// 8 rounds: the same stream on every platform for the same seed).
pub fn rng(seed: u64) -> ChaCha8Rng {
    ChaCha8Rng::seed_from_u64(seed)
}
