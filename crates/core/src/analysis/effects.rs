//! Effect sizes of the treatments and the split of a predator's effect.
//!
//! - Log response ratio LRR = ln(X̄_T / X̄_C) with variance
//!   v = s_T² / (n_T X̄_T²) + s_C² / (n_C X̄_C²) and 95 % interval
//!   LRR ± 1.959964 √v (Hedges, Gurevitch & Curtis 1999, Ecology
//!   80:1150–1156). The normal approximation is doubtful when X̄ / (s/√n) < 3
//!   in either group (same source, from memory) and LRR is undefined when a
//!   mean is 0; both are stated on the row. Contrasts that share a control are
//!   correlated (covariance s_C² / (n_C X̄_C²); Lajeunesse 2011, Ecology
//!   92:2049–2055).
//! - Predator effect split (Preisser, Bolnick & Benard 2005, Ecology
//!   86:501–509): with X_none (herbivores, no predator), X_lethal and X_risk
//!   (a predator that cannot kill): total = ln(X_lethal / X_none);
//!   non-consumptive = ln(X_risk / X_none); consumptive = total −
//!   non-consumptive = ln(X_lethal / X_risk); share = non-consumptive / total.
//!   The share is unstable when the total is near 0, so it gets a seeded
//!   percentile bootstrap interval (cages resampled with replacement within
//!   each treatment; one stream per day and set of cages, so every response
//!   measured on the same cages is resampled alike). Interpretation caveats:
//!   Abrams 2007 (Ecology 88:2555–2562); Okuyama & Bolker 2007 (Ecology
//!   Letters 10:264–271).

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

use super::summary::Summary;
use super::survival::z_975;

/// Below this ratio of mean to standard error the normal approximation of
/// the log response ratio is doubtful (Hedges, Gurevitch & Curtis 1999).
pub const NORMAL_APPROXIMATION_MIN: f64 = 3.0;

/// A log response ratio with its variance and 95 % interval. Variance and
/// interval are `None` when a group has fewer than two values.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct LogResponseRatio {
    /// ln(X̄_T / X̄_C).
    pub lrr: f64,
    /// Its sampling variance.
    pub variance: Option<f64>,
    /// √variance.
    pub se: Option<f64>,
    /// LRR − 1.959964 SE.
    pub ci_low: Option<f64>,
    /// LRR + 1.959964 SE.
    pub ci_high: Option<f64>,
}

/// The variance term s² / (n X̄²) of one group; `None` without a SD.
fn variance_term(s: &Summary) -> Option<f64> {
    s.sd.map(|sd| sd * sd / (s.n as f64 * s.mean * s.mean))
}

/// LRR of treatment `t` against control `c`; `None` when a mean is not above 0.
pub fn log_response_ratio(t: &Summary, c: &Summary) -> Option<LogResponseRatio> {
    if t.mean <= 0.0 || c.mean <= 0.0 {
        return None;
    }
    let lrr = (t.mean / c.mean).ln();
    let variance = variance_term(t).zip(variance_term(c)).map(|(a, b)| a + b);
    Some(with_interval(lrr, variance))
}

fn with_interval(value: f64, variance: Option<f64>) -> LogResponseRatio {
    let z = z_975();
    let se = variance.map(f64::sqrt);
    LogResponseRatio {
        lrr: value,
        variance,
        se,
        ci_low: se.map(|s| value - z * s),
        ci_high: se.map(|s| value + z * s),
    }
}

/// X̄ / (s / √n): below 3 the normal approximation is doubtful. `None` without a SD.
pub fn mean_to_se(s: &Summary) -> Option<f64> {
    s.se.map(|se| if se > 0.0 { s.mean / se } else { f64::INFINITY })
}

/// Plain-word caveats of a contrast between two groups named `t` and `c`.
pub fn caveats(t_name: &str, t: &Summary, c_name: &str, c: &Summary) -> Vec<String> {
    let mut out = Vec::new();
    for (name, s) in [(t_name, t), (c_name, c)] {
        if s.mean == 0.0 {
            out.push(format!(
                "mean of {name} is 0: the log response ratio is undefined"
            ));
        } else if s.mean < 0.0 {
            out.push(format!(
                "mean of {name} is below 0: the log response ratio is undefined"
            ));
        } else if s.n < 2 {
            out.push(format!("{name} has one cage: no variance"));
        } else if let Some(r) = mean_to_se(s).filter(|r| *r < NORMAL_APPROXIMATION_MIN) {
            out.push(format!(
                "normal approximation doubtful for {name}: mean / SE = {r:.2} < 3"
            ));
        }
    }
    out
}

/// The split of a predator's total effect into non-consumptive and
/// consumptive parts (log ratios).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Split {
    /// ln(X_lethal / X_none).
    pub total: f64,
    /// ln(X_risk / X_none).
    pub nonconsumptive: f64,
    /// ln(X_lethal / X_risk) = total − non-consumptive.
    pub consumptive: f64,
    /// non-consumptive / total; `None` when the total is 0.
    pub share: Option<f64>,
}

/// Split from the three treatment means; `None` when a mean is not above 0.
pub fn predator_split(none: f64, lethal: f64, risk: f64) -> Option<Split> {
    if none <= 0.0 || lethal <= 0.0 || risk <= 0.0 {
        return None;
    }
    let total = (lethal / none).ln();
    let nonconsumptive = (risk / none).ln();
    Some(Split {
        total,
        nonconsumptive,
        consumptive: (lethal / risk).ln(),
        share: (total != 0.0).then(|| nonconsumptive / total),
    })
}

/// A percentile bootstrap interval of the non-consumptive share.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct BootstrapInterval {
    /// Resamples drawn.
    pub reps: usize,
    /// Resamples in which the share was defined (all means above 0, total not 0).
    pub valid: usize,
    /// 2.5 % point of the valid shares; `None` when under 90 % were valid.
    pub low: Option<f64>,
    /// 97.5 % point.
    pub high: Option<f64>,
    /// The seed of this interval's random stream.
    pub seed: u64,
}

/// Share of resamples that must give a defined share for an interval.
const MIN_VALID: f64 = 0.9;

/// Resampled positions for a bootstrap of three groups: `reps` resamples,
/// each drawing, within each group, as many positions as the group has
/// values, with replacement (seeded ChaCha8). Drawn once, they serve every
/// response measured on the same cages.
#[derive(Debug, Clone)]
pub struct Resamples {
    reps: usize,
    sizes: [usize; 3],
    seed: u64,
    positions: Vec<u32>,
}

impl Resamples {
    /// Draw `reps` resamples of groups of the given sizes.
    pub fn draw(sizes: [usize; 3], reps: usize, seed: u64) -> Resamples {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let per_rep: usize = sizes.iter().sum();
        let mut positions = Vec::with_capacity(reps * per_rep);
        if sizes.iter().all(|n| *n > 0) {
            for _ in 0..reps {
                for n in sizes {
                    // u32 draws keep the stream the same on 32- and 64-bit machines.
                    let n = n as u32;
                    positions.extend((0..n).map(|_| rng.random_range(0..n)));
                }
            }
        }
        Resamples {
            reps,
            sizes,
            seed,
            positions,
        }
    }
}

/// Percentile bootstrap of the share from three groups of values (no
/// predator, lethal, risk), resampled by `resamples`, whose group sizes must
/// be the lengths of the groups (else no resample is valid).
pub fn bootstrap_share(groups: [&[f64]; 3], resamples: &Resamples) -> BootstrapInterval {
    let mut shares = Vec::with_capacity(resamples.reps);
    let sizes_match = groups.iter().map(|g| g.len()).eq(resamples.sizes);
    if sizes_match && !resamples.positions.is_empty() {
        let per_rep: usize = resamples.sizes.iter().sum();
        for rep in resamples.positions.chunks_exact(per_rep) {
            let mut means = [0.0f64; 3];
            let mut at = 0;
            for (k, values) in groups.iter().enumerate() {
                let n = values.len();
                let sum: f64 = rep[at..at + n].iter().map(|p| values[*p as usize]).sum();
                means[k] = sum / n as f64;
                at += n;
            }
            if let Some(share) = predator_split(means[0], means[1], means[2]).and_then(|s| s.share)
                && share.is_finite()
            {
                shares.push(share);
            }
        }
    }
    let reps = resamples.reps;
    let valid = shares.len();
    let enough = reps > 0 && valid as f64 >= MIN_VALID * reps as f64;
    shares.sort_by(f64::total_cmp);
    BootstrapInterval {
        reps,
        valid,
        low: enough.then(|| quantile(&shares, 0.025)),
        high: enough.then(|| quantile(&shares, 0.975)),
        seed: resamples.seed,
    }
}

/// The `p` quantile of sorted values by linear interpolation between order
/// statistics (Hyndman & Fan 1996 type 7, from memory; the default of R and
/// numpy).
pub fn quantile(sorted: &[f64], p: f64) -> f64 {
    let h = (sorted.len() - 1) as f64 * p;
    let lo = h.floor() as usize;
    let hi = h.ceil() as usize;
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// The seed of a bootstrap stream: the base seed mixed with an FNV-1a hash
/// of what the stream resamples (the day and the cages of each group), so an
/// interval does not depend on which other responses were analysed.
pub fn stream_seed(base: u64, key: &str) -> u64 {
    // FNV-1a, 64 bit (Fowler, Noll & Vo; common practice).
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for b in key.bytes() {
        h ^= u64::from(b);
        h = h.wrapping_mul(0x0000_0100_0000_01b3);
    }
    base ^ h
}

/// The contrasts fieldcage reports; treatment roles come from the treatment
/// rows (herbivores yes/no, predator mode), never from codes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Contrast {
    /// Herbivores without predators vs plants only.
    HerbivoresVsPlantsOnly,
    /// Herbivores with a lethal predator vs herbivores without predators.
    LethalVsNoPredator,
    /// Herbivores with a risk-only predator vs herbivores without predators.
    RiskVsNoPredator,
}

impl Contrast {
    /// Every contrast, in report order.
    pub const ALL: [Contrast; 3] = [
        Contrast::HerbivoresVsPlantsOnly,
        Contrast::LethalVsNoPredator,
        Contrast::RiskVsNoPredator,
    ];

    /// Name in tables and on the command line.
    pub fn as_str(self) -> &'static str {
        match self {
            Contrast::HerbivoresVsPlantsOnly => "herbivores_vs_plants_only",
            Contrast::LethalVsNoPredator => "lethal_vs_no_predator",
            Contrast::RiskVsNoPredator => "risk_vs_no_predator",
        }
    }
}

/// One contrast of one response on one day (analysis table `effect`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EffectRow {
    pub response: String,
    pub day: i64,
    pub contrast: Contrast,
    pub treatment: String,
    pub control: String,
    pub n_treatment: i64,
    pub mean_treatment: f64,
    pub sd_treatment: Option<f64>,
    pub n_control: i64,
    pub mean_control: f64,
    pub sd_control: Option<f64>,
    pub lrr: Option<f64>,
    pub variance: Option<f64>,
    pub se: Option<f64>,
    pub ci_low: Option<f64>,
    pub ci_high: Option<f64>,
    pub note: Option<String>,
}

/// The predator split of one response on one day (analysis table
/// `predator_split`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SplitRow {
    pub response: String,
    pub day: i64,
    pub no_predator: String,
    pub lethal: String,
    pub risk: String,
    pub mean_no_predator: f64,
    pub mean_lethal: f64,
    pub mean_risk: f64,
    pub total: Option<f64>,
    pub total_ci_low: Option<f64>,
    pub total_ci_high: Option<f64>,
    pub nonconsumptive: Option<f64>,
    pub nonconsumptive_ci_low: Option<f64>,
    pub nonconsumptive_ci_high: Option<f64>,
    pub consumptive: Option<f64>,
    pub consumptive_ci_low: Option<f64>,
    pub consumptive_ci_high: Option<f64>,
    pub share: Option<f64>,
    pub share_ci_low: Option<f64>,
    pub share_ci_high: Option<f64>,
    pub bootstrap_reps: i64,
    pub bootstrap_valid: i64,
    pub bootstrap_seed: String,
    pub note: Option<String>,
}

/// One treatment's cage values of a response on a day.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Group<'a> {
    pub code: &'a str,
    pub values: &'a [f64],
    pub summary: &'a Summary,
}

/// The effect row of one contrast.
pub(crate) fn effect_row(
    response: &str,
    day: i64,
    contrast: Contrast,
    t: Group<'_>,
    c: Group<'_>,
) -> EffectRow {
    let lrr = log_response_ratio(t.summary, c.summary);
    let notes = caveats(t.code, t.summary, c.code, c.summary);
    EffectRow {
        response: response.to_owned(),
        day,
        contrast,
        treatment: t.code.to_owned(),
        control: c.code.to_owned(),
        n_treatment: t.summary.n as i64,
        mean_treatment: t.summary.mean,
        sd_treatment: t.summary.sd,
        n_control: c.summary.n as i64,
        mean_control: c.summary.mean,
        sd_control: c.summary.sd,
        lrr: lrr.map(|l| l.lrr),
        variance: lrr.and_then(|l| l.variance),
        se: lrr.and_then(|l| l.se),
        ci_low: lrr.and_then(|l| l.ci_low),
        ci_high: lrr.and_then(|l| l.ci_high),
        note: (!notes.is_empty()).then(|| notes.join("; ")),
    }
}

/// The split row of one response on one day.
pub(crate) fn split_row(
    response: &str,
    day: i64,
    none: Group<'_>,
    lethal: Group<'_>,
    risk: Group<'_>,
    resamples: &Resamples,
) -> SplitRow {
    let split = predator_split(none.summary.mean, lethal.summary.mean, risk.summary.mean);
    let v = |s: &Summary| variance_term(s);
    let (vn, vl, vr) = (v(none.summary), v(lethal.summary), v(risk.summary));
    let sum = |a: Option<f64>, b: Option<f64>| a.zip(b).map(|(a, b)| a + b);
    let total = split.map(|s| with_interval(s.total, sum(vl, vn)));
    let nce = split.map(|s| with_interval(s.nonconsumptive, sum(vr, vn)));
    let ce = split.map(|s| with_interval(s.consumptive, sum(vl, vr)));
    let boot = bootstrap_share([none.values, lethal.values, risk.values], resamples);
    let mut notes = Vec::new();
    for (name, s) in [
        (none.code, none.summary),
        (lethal.code, lethal.summary),
        (risk.code, risk.summary),
    ] {
        if s.mean <= 0.0 {
            notes.push(format!("mean of {name} is 0: the split is undefined"));
        }
    }
    match (split, total) {
        (Some(s), _) if s.share.is_none() => {
            notes.push("total effect is 0: the non-consumptive share is undefined".to_owned());
        }
        (Some(_), Some(t))
            if t.ci_low
                .zip(t.ci_high)
                .is_none_or(|(lo, hi)| lo <= 0.0 && hi >= 0.0) =>
        {
            notes.push(
                "total effect near 0 (its 95 % interval includes 0): the non-consumptive share is unstable"
                    .to_owned(),
            );
        }
        _ => {}
    }
    if split.is_some() && boot.low.is_none() {
        notes.push(format!(
            "share defined in only {} of {} resamples: no bootstrap interval",
            boot.valid, boot.reps
        ));
    }
    SplitRow {
        response: response.to_owned(),
        day,
        no_predator: none.code.to_owned(),
        lethal: lethal.code.to_owned(),
        risk: risk.code.to_owned(),
        mean_no_predator: none.summary.mean,
        mean_lethal: lethal.summary.mean,
        mean_risk: risk.summary.mean,
        total: total.map(|t| t.lrr),
        total_ci_low: total.and_then(|t| t.ci_low),
        total_ci_high: total.and_then(|t| t.ci_high),
        nonconsumptive: nce.map(|t| t.lrr),
        nonconsumptive_ci_low: nce.and_then(|t| t.ci_low),
        nonconsumptive_ci_high: nce.and_then(|t| t.ci_high),
        consumptive: ce.map(|t| t.lrr),
        consumptive_ci_low: ce.and_then(|t| t.ci_low),
        consumptive_ci_high: ce.and_then(|t| t.ci_high),
        share: split.and_then(|s| s.share),
        share_ci_low: boot.low,
        share_ci_high: boot.high,
        bootstrap_reps: boot.reps as i64,
        bootstrap_valid: boot.valid as i64,
        // Text: a 64-bit seed does not fit a spreadsheet's numbers exactly.
        bootstrap_seed: boot.seed.to_string(),
        note: (!notes.is_empty()).then(|| notes.join("; ")),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn group(n: usize, mean: f64, sd: f64) -> Summary {
        let se = sd / (n as f64).sqrt();
        Summary {
            n,
            mean,
            sd: Some(sd),
            se: Some(se),
            ci_low: None,
            ci_high: None,
        }
    }

    fn close(a: f64, b: f64) {
        assert!((a - b).abs() < 5e-7, "{a} vs {b}");
    }

    #[test]
    fn log_response_ratio_check_value() {
        // docs/methods.md §5 check value (computed; Hedges, Gurevitch & Curtis
        // 1999): T = 120 (s 30, n 5), C = 80 (s 20, n 5) → LRR 0.405465,
        // v 0.025000, SE 0.158114, CI [0.095568, 0.715363].
        let l = log_response_ratio(&group(5, 120.0, 30.0), &group(5, 80.0, 20.0)).unwrap();
        close(l.lrr, 0.405465);
        close(l.variance.unwrap(), 0.025);
        close(l.se.unwrap(), 0.158114);
        close(l.ci_low.unwrap(), 0.095568);
        close(l.ci_high.unwrap(), 0.715363);
    }

    #[test]
    fn a_zero_mean_makes_the_ratio_undefined_and_says_so() {
        let t = group(5, 0.0, 0.0);
        let c = group(5, 80.0, 20.0);
        assert_eq!(log_response_ratio(&t, &c), None);
        let notes = caveats("S", &t, "P", &c);
        assert_eq!(
            notes,
            vec!["mean of S is 0: the log response ratio is undefined"]
        );
    }

    #[test]
    fn doubtful_normal_approximation_is_flagged_at_3() {
        // Hedges, Gurevitch & Curtis 1999 (from memory): warn when X̄/(s/√n) < 3.
        // n 4, SD 2 → SE 1; mean 2.9 is flagged, mean 3 is not.
        let c = group(4, 10.0, 2.0);
        let flagged = caveats("SR", &group(4, 2.9, 2.0), "S", &c);
        assert_eq!(flagged.len(), 1);
        assert!(flagged[0].contains("mean / SE = 2.90 < 3"), "{flagged:?}");
        assert!(caveats("SR", &group(4, 3.0, 2.0), "S", &c).is_empty());
    }

    #[test]
    fn predator_split_check_value() {
        // docs/methods.md §5 check value (computed; Preisser, Bolnick & Benard
        // 2005): none 80, lethal 120, risk 110 → total 0.405465,
        // non-consumptive 0.318454, consumptive 0.087011, share 0.785404.
        let s = predator_split(80.0, 120.0, 110.0).unwrap();
        close(s.total, 0.405465);
        close(s.nonconsumptive, 0.318454);
        close(s.consumptive, 0.087011);
        close(s.share.unwrap(), 0.785404);
        assert_eq!(predator_split(80.0, 80.0, 90.0).unwrap().share, None);
        assert_eq!(predator_split(0.0, 80.0, 90.0), None);
    }

    #[test]
    fn bootstrap_is_seeded_and_brackets_the_estimate() {
        let none = [78.0, 82.0, 80.0, 79.0, 81.0, 80.0];
        let lethal = [118.0, 122.0, 120.0, 119.0, 121.0, 120.0];
        let risk = [108.0, 112.0, 110.0, 109.0, 111.0, 110.0];
        let draw = |seed| Resamples::draw([6, 6, 6], 500, seed);
        let a = bootstrap_share([&none, &lethal, &risk], &draw(7));
        let b = bootstrap_share([&none, &lethal, &risk], &draw(7));
        assert_eq!(a, b, "same seed, same interval");
        assert_eq!(a.valid, 500);
        let (lo, hi) = (a.low.unwrap(), a.high.unwrap());
        // The point estimate (0.785404, docs/methods.md §5) lies inside.
        assert!(lo < 0.785404 && 0.785404 < hi, "[{lo}, {hi}]");
        let c = bootstrap_share([&none, &lethal, &risk], &draw(8));
        assert_ne!(a.low, c.low, "another seed, another stream");
        // Resamples drawn for other group sizes fit no group: no interval.
        let wrong = bootstrap_share([&none, &lethal, &risk], &Resamples::draw([5, 6, 6], 500, 7));
        assert_eq!((wrong.valid, wrong.low), (0, None));
    }

    #[test]
    fn a_total_near_zero_is_flagged() {
        let s = |v: &[f64]| super::super::summary::summarise(v).unwrap().unwrap();
        let (vn, vl, vr) = (
            [10.0, 30.0, 20.0, 25.0],
            [12.0, 28.0, 22.0, 20.0],
            [15.0, 25.0, 21.0, 18.0],
        );
        let (sn, sl, sr) = (s(&vn), s(&vl), s(&vr));
        let g = |code, values, summary| Group {
            code,
            values,
            summary,
        };
        let row = split_row(
            "cover.total",
            14,
            g("S", &vn, &sn),
            g("SB", &vl, &sl),
            g("SR", &vr, &sr),
            &Resamples::draw([4, 4, 4], 200, 1),
        );
        assert!(
            row.note
                .as_deref()
                .unwrap_or("")
                .contains("total effect near 0"),
            "{row:?}"
        );
    }

    #[test]
    fn quantiles_interpolate_between_order_statistics() {
        // Hyndman & Fan 1996 type 7 (from memory): numpy's default.
        let v = [1.0, 2.0, 3.0, 4.0];
        assert_eq!(quantile(&v, 0.0), 1.0);
        assert_eq!(quantile(&v, 1.0), 4.0);
        assert_eq!(quantile(&v, 0.5), 2.5);
        assert!((quantile(&v, 0.025) - 1.075).abs() < 1e-12);
    }

    #[test]
    fn stream_seeds_differ_by_key_and_base() {
        let a = stream_seed(1, "14|C-01,C-05|C-02|C-03");
        assert_ne!(a, stream_seed(1, "28|C-01,C-05|C-02|C-03"));
        assert_ne!(a, stream_seed(2, "14|C-01,C-05|C-02|C-03"));
        assert_eq!(a, stream_seed(1, "14|C-01,C-05|C-02|C-03"));
    }
}
