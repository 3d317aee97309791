//! `report.md`: a short Markdown report that states each result of the
//! season with the method and the assumptions behind it. It holds the
//! headline numbers (each response's last day); every number, for every day,
//! is in the analysis tables. No timestamp: the same data give the same bytes.

use std::fmt::Write as _;

use serde::Serialize;

use super::{Contrast, MissingRule, Results, response};
use crate::tables;

/// File name of the report in an export folder.
pub const FILE: &str = "report.md";

fn num(x: Option<f64>, decimals: usize) -> String {
    match x {
        Some(x) => {
            let s = format!("{x:.decimals$}");
            // No "-0.000" for a value that rounds to zero.
            if s.trim_start_matches('-')
                .chars()
                .all(|c| c == '0' || c == '.')
            {
                s.trim_start_matches('-').to_owned()
            } else {
                s
            }
        }
        None => "NA".to_owned(),
    }
}

fn interval(lo: Option<f64>, hi: Option<f64>, decimals: usize) -> String {
    match (lo, hi) {
        (Some(_), Some(_)) => format!("[{}, {}]", num(lo, decimals), num(hi, decimals)),
        _ => "NA".to_owned(),
    }
}

/// Whether a response is one of the report's headline responses.
pub(crate) fn headline(name: &str) -> bool {
    name == response::COVER_TOTAL
        || name.starts_with(response::COVER_GROUP)
        || name == "diversity.richness"
        || name == "diversity.shannon"
        || name == response::DAMAGE_INDEX
        || name == response::DAMAGE_MEAN
        || name.starts_with(response::SURVIVAL)
}

/// Source of the consumptive / non-consumptive split.
const SPLIT_SOURCE: &str = "Preisser, Bolnick & Benard 2005";

/// What each part of the results assumes, in plain words: the report prints
/// these under its sections and the results screen beside its charts.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Assumptions {
    /// Survival of stocked animals (Kaplan–Meier and per-cage rates).
    pub survival: String,
    /// Treatment means with t-based intervals; cover, diversity, herbivory.
    pub summaries: String,
    /// Log response ratios.
    pub effects: String,
    /// The consumptive / non-consumptive split.
    pub split: String,
}

/// How animals not found alive are counted, in words.
fn missing_rule(rule: MissingRule) -> &'static str {
    match rule {
        MissingRule::Dead => {
            "Animals not found alive in a closed cage count as deaths (eaten or died unseen)."
        }
        MissingRule::Censored => {
            "Only animals found dead count as deaths; missing animals are censored at the census."
        }
    }
}

/// The assumptions behind a season's results (they name the options used).
pub fn assumptions(r: &Results) -> Assumptions {
    let missing = missing_rule(r.options.missing_as);
    Assumptions {
        survival: format!(
            "{missing} Animals are counted, not marked, so the animals of a cage \
             share one fate process. Kaplan–Meier (Kaplan & Meier 1958) with Greenwood's variance \
             and a log–log 95 % interval; deaths are placed on the census day that found them \
             (interval-grouped). Restocked animals enter the risk set on their stocking day \
             (staggered entry, Pollock et al. 1989) and the initial number stocked is kept. \
             Per cage (`cage_survival.csv`): proportion recovered (product over census intervals \
             of the share found alive; N_t / N_0 without restocking), constant-hazard daily \
             survival (N_t / N_0)^(1/t), and the exposure-day rate of Mayfield (1961, 1975) with \
             losses at interval midpoints; both daily rates assume a hazard constant over the \
             season. A count above the animals at risk is capped at that number (see the notes)."
        ),
        summaries: "cages are the independent replicates; the 95 % interval is \
         mean ± t(0.975, n − 1) × SD/√n (Student's t from statrs), which assumes roughly normal \
         cage values or enough cages for the mean to be. Cover: percent as entered, class \
         midpoints of the protocol's scale (midpoints are data; midpoint conversion biases \
         diversity indices, Dembicz & Dengler 2025), or 100 × hits / pins (Elzinga, Salzer & \
         Willoughby 1998); 0 = looked, absent, and rows not assessed are left out. Diversity from \
         proportions of species cover: Shannon H′ (natural log), Pielou J′ (NA for one \
         species), Simpson D (Simpson 1949), 1 − D, 1/D, Hill numbers of order 0, 1, 2 (Hill \
         1973; Jost 2006). Herbivory index Σ(n_i × i)/N over damage classes (Dirzo & Domínguez \
         1995) and mean percent damage from class midpoints; damage on a tagged leaf is \
         cumulative, so a later day includes earlier damage."
            .to_owned(),
        effects: format!(
            "LRR = ln(X̄_T / X̄_C) with variance s_T²/(n_T X̄_T²) + s_C²/(n_C X̄_C²) and a \
             normal 95 % interval LRR ± 1.959964 SE (Hedges, Gurevitch & Curtis 1999). The normal \
             approximation is doubtful when X̄/(s/√n) < 3 in a group, and LRR is undefined when a \
             mean is 0; such rows say so in their note. The {} and {} contrasts share their control, \
             so they are correlated (covariance s_C²/(n_C X̄_C²); Lajeunesse 2011).",
            Contrast::LethalVsNoPredator.as_str(),
            Contrast::RiskVsNoPredator.as_str()
        ),
        split: format!(
            "total = ln(X_lethal / X_none), \
             non-consumptive = ln(X_risk / X_none), consumptive = ln(X_lethal / X_risk), share = \
             non-consumptive / total. This assumes a predator that cannot kill frightens herbivores \
             as much as one that can, and that the two effects add on the log scale; see Abrams 2007 \
             and Okuyama & Bolker 2007 for when that fails. The share is unstable when the total is \
             near 0 (flagged when the total's 95 % interval includes 0). Its interval is a percentile \
             bootstrap: {} resamples of cages with replacement within each treatment, seeded \
             (base seed {}; one ChaCha8 stream per day and set of cages, shared by every response \
             measured on those cages; the seed is in each row).",
            r.options.bootstrap_reps, r.options.bootstrap_seed
        ),
    }
}

/// The report as Markdown.
pub fn render(r: &Results) -> String {
    let a = assumptions(r);
    let mut s = String::new();
    let title = r
        .experiment
        .as_ref()
        .map_or("fieldcage season".to_owned(), |(code, title)| {
            format!("{title} ({code})")
        });
    let _ = writeln!(s, "# Results: {title}\n");
    s.push_str(
        "Derived by fieldcage from the stored tables of this package; every number here is \
         in the analysis tables listed at the end, which give every response on every day. \
         Each section names its method, its source and what it assumes. The day's-end checks \
         are not applied: a value a check flags is analysed as recorded.\n\n",
    );

    s.push_str("## Treatments and contrasts\n\n");
    s.push_str("| treatment | name | herbivores | predator |\n|---|---|---|---|\n");
    for t in &r.treatments {
        let _ = writeln!(
            s,
            "| {} | {} | {} | {} |",
            t.code,
            t.name,
            if t.herbivores { "yes" } else { "no" },
            t.predator_mode
        );
    }
    s.push_str(
        "\nRoles come from the treatment rows (herbivores yes/no, predator mode), not from codes. \
         Contrasts: herbivores without predators vs plants only; lethal predator vs no predator; \
         risk-only predator vs no predator (both with herbivores).\n\n",
    );

    // Survival.
    s.push_str("## Survival of stocked animals\n\n");
    let mut last_curve: Vec<&super::survival::SurvivalCurveRow> = Vec::new();
    for row in &r.survival_curve {
        match last_curve.last_mut() {
            Some(prev) if prev.treatment == row.treatment && prev.taxon == row.taxon => {
                *prev = row;
            }
            _ => last_curve.push(row),
        }
    }
    if last_curve.is_empty() {
        s.push_str("No stocked animals were followed.\n\n");
    } else {
        s.push_str(
            "Kaplan–Meier survival at the last census, pooled over each treatment's cages:\n\n\
             | treatment | taxon | day | at risk | survival | 95 % interval |\n|---|---|---:|---:|---:|---|\n",
        );
        for c in &last_curve {
            let _ = writeln!(
                s,
                "| {} | {} | {} | {} | {} | {} |",
                c.treatment,
                c.taxon,
                c.day,
                c.at_risk,
                num(Some(c.survival), 3),
                interval(c.ci_low, c.ci_high, 3)
            );
        }
        let _ = write!(s, "\nAssumptions: {}\n\n", a.survival);
    }

    // Treatment means of the headline responses.
    s.push_str("## Cover, diversity and herbivory by treatment\n\n");
    s.push_str(
        "Treatment means on each response's last day (cover and diversity from the last cover \
         visit, damage from the last damage visit):\n\n\
         | response | day | treatment | n | mean | SD | 95 % interval |\n|---|---:|---|---:|---:|---:|---|\n",
    );
    let mut any = false;
    for t in r.treatment_summary.iter().filter(|t| {
        headline(&t.response)
            && !t.response.starts_with(response::SURVIVAL)
            && r.last_day(&t.response) == Some(t.day)
    }) {
        any = true;
        let _ = writeln!(
            s,
            "| {} | {} | {} | {} | {} | {} | {} |",
            t.response,
            t.day,
            t.treatment,
            t.n,
            num(Some(t.mean), 3),
            num(t.sd, 3),
            interval(t.ci_low, t.ci_high, 3)
        );
    }
    if !any {
        s.push_str("| (no cover or damage records) | | | | | | |\n");
    }
    let _ = write!(s, "\nAssumptions: {}\n\n", a.summaries);

    // Effects.
    s.push_str("## Treatment effects (log response ratios)\n\n");
    s.push_str(
        "| response | day | contrast | treatment / control | LRR | 95 % interval | note |\n\
         |---|---:|---|---|---:|---|---|\n",
    );
    let mut any = false;
    for e in r
        .effect
        .iter()
        .filter(|e| headline(&e.response) && r.last_day(&e.response) == Some(e.day))
    {
        any = true;
        let _ = writeln!(
            s,
            "| {} | {} | {} | {} / {} | {} | {} | {} |",
            e.response,
            e.day,
            e.contrast.as_str(),
            e.treatment,
            e.control,
            num(e.lrr, 3),
            interval(e.ci_low, e.ci_high, 3),
            e.note.as_deref().unwrap_or("")
        );
    }
    if !any {
        s.push_str("| (no contrast has data) | | | | | | |\n");
    }
    let _ = write!(s, "\nAssumptions: {}\n\n", a.effects);

    // Split.
    s.push_str("## Consumptive and non-consumptive predator effects\n\n");
    s.push_str(
        "| response | day | total | non-consumptive | consumptive | share | share 95 % interval | note |\n\
         |---|---:|---:|---:|---:|---:|---|---|\n",
    );
    let mut any = false;
    for p in r
        .predator_split
        .iter()
        .filter(|p| headline(&p.response) && r.last_day(&p.response) == Some(p.day))
    {
        any = true;
        let _ = writeln!(
            s,
            "| {} | {} | {} | {} | {} | {} | {} | {} |",
            p.response,
            p.day,
            num(p.total, 3),
            num(p.nonconsumptive, 3),
            num(p.consumptive, 3),
            num(p.share, 3),
            interval(p.share_ci_low, p.share_ci_high, 3),
            p.note.as_deref().unwrap_or("")
        );
    }
    if !any {
        s.push_str("| (needs treatments with herbivores and no, lethal and risk-only predators) | | | | | | | |\n");
    }
    let _ = write!(s, "\nAssumptions ({}): {}\n\n", SPLIT_SOURCE, a.split);

    s.push_str("## Data handling\n\n");
    if r.notes.is_empty() {
        s.push_str("Nothing was set aside.\n\n");
    } else {
        for n in &r.notes {
            let _ = writeln!(s, "- {n}");
        }
        s.push('\n');
    }
    s.push_str(
        "A visit's day is its scheduled day (or days since the start date when unscheduled). \
         When a cage has more than one census, cover or damage visit on a day, the one started \
         last is used.\n\n",
    );

    s.push_str("## Analysis tables\n\n");
    for t in tables::analysis() {
        let _ = writeln!(s, "- `{}.csv` — {}", t.name, t.title);
    }
    s
}

/// Pad the cells of each column to a common width (plain-text table).
fn aligned(rows: &[Vec<String>]) -> String {
    let columns = rows.iter().map(Vec::len).max().unwrap_or(0);
    let widths: Vec<usize> = (0..columns)
        .map(|i| {
            rows.iter()
                .filter_map(|r| r.get(i))
                .map(|c| c.chars().count())
                .max()
                .unwrap_or(0)
        })
        .collect();
    let mut out = String::new();
    for r in rows {
        let line: Vec<String> = r
            .iter()
            .enumerate()
            .map(|(i, c)| format!("{c:<w$}", w = widths[i]))
            .collect();
        out.push_str(line.join("  ").trim_end());
        out.push('\n');
    }
    out
}

/// The effect table printed by `fieldcage results`: log response ratios,
/// then the predator split, then what they assume.
pub fn effect_table(
    results: &Results,
    effects: &[&super::EffectRow],
    splits: &[&super::SplitRow],
) -> String {
    let mut rows = vec![
        [
            "response",
            "day",
            "contrast",
            "treatment/control",
            "n",
            "LRR",
            "95 % interval",
            "note",
        ]
        .map(str::to_owned)
        .to_vec(),
    ];
    for e in effects {
        rows.push(vec![
            e.response.clone(),
            e.day.to_string(),
            e.contrast.as_str().to_owned(),
            format!("{} / {}", e.treatment, e.control),
            format!("{}/{}", e.n_treatment, e.n_control),
            num(e.lrr, 3),
            interval(e.ci_low, e.ci_high, 3),
            e.note.clone().unwrap_or_default(),
        ]);
    }
    let mut out = String::from("Log response ratios, ln(mean treatment / mean control)\n\n");
    out.push_str(&aligned(&rows));
    if !splits.is_empty() {
        let mut rows = vec![
            [
                "response",
                "day",
                "none/lethal/risk",
                "total",
                "non-consumptive",
                "consumptive",
                "share",
                "share 95 % interval",
                "note",
            ]
            .map(str::to_owned)
            .to_vec(),
        ];
        for p in splits {
            rows.push(vec![
                p.response.clone(),
                p.day.to_string(),
                format!("{}/{}/{}", p.no_predator, p.lethal, p.risk),
                num(p.total, 3),
                num(p.nonconsumptive, 3),
                num(p.consumptive, 3),
                num(p.share, 3),
                interval(p.share_ci_low, p.share_ci_high, 3),
                p.note.clone().unwrap_or_default(),
            ]);
        }
        out.push_str("\nPredator effect split (log ratios)\n\n");
        out.push_str(&aligned(&rows));
    }
    // The same texts as report.md and the results screen (one source).
    let a = assumptions(results);
    let _ = write!(
        out,
        "\nAssumptions:\n- Replicates and summaries: {}\n- Effects: {}\n- Split: {}\n- Survival: {}\n\
         Methods and every day: export the season and read report.md.\n",
        a.summaries,
        a.effects,
        a.split,
        missing_rule(results.options.missing_as),
    );
    out
}
