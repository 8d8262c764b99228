//! The one place random streams are made.
//!
//! Every command has one master seed, written to its record. Stream `i` (a chain, a
//! restart) is ChaCha20 seeded with the master seed and switched to stream number `i`,
//! so results never depend on thread scheduling or on how many streams run at once.

use rand::SeedableRng;
use rand_chacha::ChaCha20Rng;

/// Name of the generator, for records.
pub const RNG_NAME: &str = "ChaCha20 (rand_chacha 0.3), stream = index";

/// The random stream number `index` of master seed `seed`.
pub fn stream(seed: u64, index: u64) -> ChaCha20Rng {
    let mut rng = ChaCha20Rng::seed_from_u64(seed);
    rng.set_stream(index);
    rng
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::Rng;

    #[test]
    fn streams_are_reproducible_and_distinct() {
        let a: u64 = stream(7, 0).gen();
        let b: u64 = stream(7, 0).gen();
        let c: u64 = stream(7, 1).gen();
        assert_eq!(a, b);
        assert_ne!(a, c);
    }
}
