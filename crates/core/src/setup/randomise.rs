//! Seeded treatment allocation as a randomised complete block design: every
//! block receives every treatment exactly once, in an order drawn
//! independently per block (e.g. Quinn & Keough 2002, *Experimental Design and
//! Data Analysis for Biologists*, ch. 10 — from memory).
//!
//! The generator is ChaCha8 seeded from the recorded seed, whose output is
//! fixed by its specification, so the same seed gives the same layout on
//! every machine and release.

use rand::SeedableRng;
use rand::seq::SliceRandom;
use rand_chacha::ChaCha8Rng;

/// Why a layout cannot be drawn.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BlockSizeMismatch {
    /// Index of the first block whose size differs.
    pub block: usize,
    /// Its number of enclosures.
    pub size: usize,
    /// Number of treatments.
    pub treatments: usize,
}

/// For each block (given by its number of enclosures), the treatment index of
/// each enclosure position. Every block must hold exactly one enclosure per
/// treatment.
pub fn rcbd(
    block_sizes: &[usize],
    treatments: usize,
    seed: u64,
) -> Result<Vec<Vec<usize>>, BlockSizeMismatch> {
    if let Some((block, &size)) = block_sizes
        .iter()
        .enumerate()
        .find(|(_, s)| **s != treatments)
    {
        return Err(BlockSizeMismatch {
            block,
            size,
            treatments,
        });
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    Ok(block_sizes
        .iter()
        .map(|_| {
            let mut order: Vec<usize> = (0..treatments).collect();
            order.shuffle(&mut rng);
            order
        })
        .collect())
}
