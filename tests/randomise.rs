//! Seeded randomised complete block design.

use fieldcage_core::setup::randomise::rcbd;
use proptest::prelude::*;

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    /// Each block is a permutation of the treatments (the defining property of
    /// a randomised complete block design; common practice), and the same
    /// seed gives the same layout.
    #[test]
    fn every_block_is_a_permutation_and_seeds_repeat(seed in any::<u64>(), blocks in 1usize..12, treatments in 1usize..9) {
        let sizes = vec![treatments; blocks];
        let layout = rcbd(&sizes, treatments, seed).unwrap();
        prop_assert_eq!(layout.len(), blocks);
        for block in &layout {
            let mut sorted = block.clone();
            sorted.sort_unstable();
            prop_assert_eq!(sorted, (0..treatments).collect::<Vec<_>>());
        }
        prop_assert_eq!(rcbd(&sizes, treatments, seed).unwrap(), layout);
    }

    #[test]
    fn a_block_of_the_wrong_size_is_refused(seed in any::<u64>(), blocks in 1usize..8, treatments in 2usize..8, bad in 0usize..8, delta in prop::sample::select(vec![-1i64, 1])) {
        let bad = bad % blocks;
        let mut sizes = vec![treatments; blocks];
        sizes[bad] = (treatments as i64 + delta) as usize;
        let err = rcbd(&sizes, treatments, seed).unwrap_err();
        prop_assert_eq!(err.block, bad);
        prop_assert_eq!(err.size, sizes[bad]);
    }
}

#[test]
fn different_seeds_give_different_layouts() {
    // 24 treatments orders per 6 blocks of 4: two seeds agreeing by chance is
    // (1/24)^6 per pair; over 20 seeds a collision would point at a bug.
    let layouts: Vec<_> = (0..20u64).map(|s| rcbd(&[4; 6], 4, s).unwrap()).collect();
    for i in 0..layouts.len() {
        for j in i + 1..layouts.len() {
            assert_ne!(layouts[i], layouts[j], "seeds {i} and {j}");
        }
    }
}

#[test]
fn blocks_are_drawn_with_roughly_uniform_orders() {
    // Over many draws each treatment should take the first position about
    // equally often (1/4 each; chi-square critical value for 3 df at
    // p = 0.001 is 16.27, from memory of the chi-square table).
    let mut first = [0u32; 4];
    for seed in 0..2_000u64 {
        for block in rcbd(&[4; 3], 4, seed).unwrap() {
            first[block[0]] += 1;
        }
    }
    let expected = 6_000.0 / 4.0;
    let chi2: f64 = first
        .iter()
        .map(|&o| (o as f64 - expected).powi(2) / expected)
        .sum();
    assert!(chi2 < 16.27, "first positions {first:?}, chi-square {chi2}");
}
