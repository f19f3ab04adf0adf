//! Shared helpers for upshot's cross-crate and reference tests: a small deterministic random
//! number generator (so generated cases do not depend on a crate's version), and paths to the
//! built binary and the repository.
#![deny(missing_docs)]

use std::path::PathBuf;

/// xorshift64* (Vigna 2016): deterministic across platforms and crate versions.
pub struct Rng(u64);

impl Rng {
    /// A generator from a seed (zero is mapped to a fixed non-zero state).
    pub fn new(seed: u64) -> Self {
        Rng(seed.wrapping_mul(0x9E3779B97F4A7C15) | 1)
    }

    /// The next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545F4914F6CDD1D)
    }

    /// A number in `0..n` (n > 0).
    pub fn below(&mut self, n: u64) -> u64 {
        self.next_u64() % n
    }
}

/// The repository root.
pub fn repo_root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .expect("tests/ sits in the repository")
        .to_path_buf()
}
