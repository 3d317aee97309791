//! Survival of stocked animals: per cage and per treatment.
//!
//! Per cage (animals are counted, not marked):
//! - Proportion recovered N_t / N_0, and the constant-hazard daily survival
//!   S_d = (N_t / N_0)^(1/t) with hazard λ = −ln(N_t / N_0) / t (common
//!   practice). With restocking, the proportion is the product over census
//!   intervals of the share of animals at risk that was found alive (the
//!   cage's own Kaplan–Meier estimate), which equals N_t / N_0 when no animal
//!   was added; the initial N_0 is never overwritten.
//! - Exposure-day (Mayfield) rate: m = deaths / animal-days, with each death
//!   counted at the midpoint of its interval (Mayfield 1961, Wilson Bulletin
//!   73:255–261; 1975, 87:456–466). Daily survival 1 − m; survival over t
//!   days (1 − m)^t.
//!
//! Per treatment: Kaplan–Meier (Kaplan & Meier 1958, JASA 53:457–481)
//! Ŝ(t) = Π (1 − d_i / n_i) over census days, with Greenwood's variance
//! Ŝ² Σ d_i / (n_i (n_i − d_i)) and a log–log 95 % interval (Kalbfleisch &
//! Prentice 1980, from memory; the interval lifelines reports). Restocked
//! animals enter the risk set on their stocking day (staggered entry,
//! Pollock et al. 1989, J. Wildlife Management 53:7–15): an animal is at risk
//! at t when it entered before t and had not left before t.
//!
//! Animals that disappear from a closed cage are lost: by default they count
//! as deaths (eaten or died unseen); [`MissingRule::Censored`] counts only
//! animals found dead and censors the missing ones.

use std::collections::{BTreeMap, BTreeSet};

use serde::{Deserialize, Serialize};
use statrs::distribution::{ContinuousCDF, Normal};

use super::season::Season;
use super::{CageRef, Notes};
use crate::model::*;
use crate::{Error, Result};

/// How animals not found at a census count.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum MissingRule {
    /// Every animal not found alive is a death (closed cage: eaten or died unseen).
    #[default]
    Dead,
    /// Only animals found dead are deaths; missing ones are censored at the census.
    Censored,
}

impl MissingRule {
    /// The rule's name in tables and the report.
    pub fn as_str(self) -> &'static str {
        match self {
            MissingRule::Dead => "dead",
            MissingRule::Censored => "censored",
        }
    }
}

/// Constant-hazard survival from a proportion surviving `days`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ConstantHazard {
    /// N_t / N_0.
    pub proportion: f64,
    /// Daily survival S_d = proportion^(1/t).
    pub daily_survival: f64,
    /// Daily mortality 1 − S_d.
    pub daily_mortality: f64,
    /// Hazard λ = −ln(proportion) / t, per day.
    pub hazard: f64,
}

/// Daily survival and hazard when a `proportion` survived `days` at a
/// constant rate. `None` for no elapsed time.
pub fn constant_hazard(proportion: f64, days: f64) -> Result<Option<ConstantHazard>> {
    if !(0.0..=1.0).contains(&proportion) {
        return Err(Error::invalid(
            "survival",
            "proportion",
            proportion,
            "must be between 0 and 1",
        ));
    }
    if !(days.is_finite() && days >= 0.0) {
        return Err(Error::invalid(
            "survival",
            "days",
            days,
            "must be a number of at least 0",
        ));
    }
    if days == 0.0 {
        return Ok(None);
    }
    let daily = proportion.powf(1.0 / days);
    Ok(Some(ConstantHazard {
        proportion,
        daily_survival: daily,
        daily_mortality: 1.0 - daily,
        hazard: -proportion.ln() / days,
    }))
}

/// Animal-days of an interval of `days` that started with `at_start` animals
/// of which `losses` were lost, each at the interval's midpoint (Mayfield 1961).
pub fn interval_exposure(at_start: f64, losses: f64, days: f64) -> f64 {
    (at_start - losses) * days + losses * days / 2.0
}

/// Exposure-day (Mayfield) mortality.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Exposure {
    /// Deaths.
    pub deaths: f64,
    /// Animal-days of exposure.
    pub animal_days: f64,
    /// Daily mortality m = deaths / animal-days.
    pub daily_mortality: f64,
    /// Daily survival 1 − m.
    pub daily_survival: f64,
}

impl Exposure {
    /// Survival over `days` at the daily rate: (1 − m)^days.
    pub fn survival_over(&self, days: f64) -> f64 {
        self.daily_survival.powf(days)
    }
}

/// The Mayfield rate from deaths and animal-days; `None` without exposure.
pub fn mayfield(deaths: f64, animal_days: f64) -> Option<Exposure> {
    (animal_days > 0.0).then(|| {
        let m = deaths / animal_days;
        Exposure {
            deaths,
            animal_days,
            daily_mortality: m,
            daily_survival: 1.0 - m,
        }
    })
}

/// `count` animals that entered at `entry` and left at `exit`, dead
/// (`event`) or censored.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Spell {
    /// Time of entry into the risk set.
    pub entry: f64,
    /// Time of death or censoring (after `entry`).
    pub exit: f64,
    /// Animals.
    pub count: u64,
    /// Died at `exit` (else censored).
    pub event: bool,
}

/// One time of a Kaplan–Meier curve.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct KmStep {
    /// Time.
    pub time: f64,
    /// Animals at risk: entered before `time`, not gone before `time`.
    pub at_risk: u64,
    /// Deaths at `time`.
    pub events: u64,
    /// Censored at `time`.
    pub censored: u64,
    /// Ŝ(time).
    pub survival: f64,
    /// Greenwood variance of Ŝ; `None` once Ŝ reached 0.
    pub variance: Option<f64>,
    /// Its square root.
    pub se: Option<f64>,
    /// Lower end of the log–log 95 % interval.
    pub ci_low: Option<f64>,
    /// Upper end of the log–log 95 % interval.
    pub ci_high: Option<f64>,
}

/// The 97.5 % point of the standard normal (1.959964).
pub(crate) fn z_975() -> f64 {
    Normal::standard().inverse_cdf(0.975)
}

/// Kaplan–Meier estimate with Greenwood variance and staggered entry, at
/// every time an animal left the risk set.
pub fn kaplan_meier(spells: &[Spell]) -> Result<Vec<KmStep>> {
    for s in spells {
        if !(s.entry.is_finite() && s.exit.is_finite()) || s.exit <= s.entry {
            return Err(Error::invalid(
                "spell",
                "exit",
                s.exit,
                format!("must be a time after the entry {}", s.entry),
            ));
        }
    }
    let z = z_975();
    let mut entries: Vec<(f64, u64)> = spells.iter().map(|s| (s.entry, s.count)).collect();
    entries.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut exits: BTreeMap<u64, (f64, u64, u64)> = BTreeMap::new();
    for s in spells {
        // Keyed by the bits of a non-negative-or-any finite time in total order.
        let e = exits.entry(order_key(s.exit)).or_insert((s.exit, 0, 0));
        if s.event {
            e.1 += s.count;
        } else {
            e.2 += s.count;
        }
    }
    let mut steps = Vec::new();
    let (mut entered, mut next_entry, mut gone) = (0u64, 0usize, 0u64);
    let (mut survival, mut greenwood) = (1.0f64, Some(0.0f64));
    for (time, events, censored) in exits.into_values() {
        while next_entry < entries.len() && entries[next_entry].0 < time {
            entered += entries[next_entry].1;
            next_entry += 1;
        }
        let at_risk = entered.saturating_sub(gone);
        gone += events + censored;
        if at_risk == 0 {
            continue;
        }
        let (n, d) = (at_risk as f64, events as f64);
        survival *= 1.0 - d / n;
        greenwood = match greenwood {
            Some(sum) if events < at_risk => Some(sum + d / (n * (n - d))),
            _ => None,
        };
        let variance = greenwood.map(|g| survival * survival * g);
        let (ci_low, ci_high) = match greenwood {
            Some(g) if survival >= 1.0 || g == 0.0 => (Some(survival), Some(survival)),
            Some(g) if survival > 0.0 => {
                // log–log interval: exp(−exp(ln(−ln Ŝ) ∓ z √Σ / ln Ŝ)).
                let v = survival.ln();
                let half = z * g.sqrt() / v;
                (
                    Some((-((-v).ln() - half).exp()).exp()),
                    Some((-((-v).ln() + half).exp()).exp()),
                )
            }
            _ => (None, None),
        };
        steps.push(KmStep {
            time,
            at_risk,
            events,
            censored,
            survival,
            variance,
            se: variance.map(f64::sqrt),
            ci_low,
            ci_high,
        });
    }
    Ok(steps)
}

/// A key that sorts finite f64 values in numeric order.
fn order_key(x: f64) -> u64 {
    let bits = x.to_bits();
    if bits >> 63 == 1 {
        !bits
    } else {
        bits | (1 << 63)
    }
}

/// What happened to the animals of one taxon in one cage.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Handling {
    /// Animals put in (initial stocking or restocking).
    Added {
        /// Day.
        day: i64,
        /// Animals.
        count: u64,
    },
    /// Animals taken out alive (censored).
    Removed {
        /// Day.
        day: i64,
        /// Animals.
        count: u64,
    },
    /// A census (counting comes before any restocking on the same visit).
    Counted {
        /// Day.
        day: i64,
        /// Found alive.
        alive: u64,
        /// Found dead (`None` = not assessed).
        dead: Option<u64>,
    },
}

/// One census of a cage's animals.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct CensusStep {
    /// Day.
    pub day: i64,
    /// Animals at risk since the previous census (with those added meanwhile).
    pub at_risk: u64,
    /// Found alive (at most `at_risk`).
    pub alive: u64,
    /// Counted as deaths.
    pub deaths: u64,
    /// Censored (missing, under [`MissingRule::Censored`]).
    pub censored: u64,
    /// Proportion recovered so far (product over censuses).
    pub survival: f64,
}

/// The survival record of one taxon in one cage.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct CageHistory {
    /// Animals added in all (initial and restocks).
    pub added: u64,
    /// Animals taken out alive.
    pub removed: u64,
    /// Day the first animals were added.
    pub first_day: Option<i64>,
    /// Every census that found animals at risk.
    pub censuses: Vec<CensusStep>,
    /// Spells for the Kaplan–Meier estimate.
    pub spells: Vec<Spell>,
    /// Deaths counted.
    pub deaths: u64,
    /// Censored animals (missing, or removed alive).
    pub censored: u64,
    /// Animal-days of exposure (Mayfield).
    pub animal_days: f64,
    /// What was set aside, in plain words.
    pub notes: Vec<String>,
}

/// Follow one taxon in one cage through its stocking events and censuses,
/// given in time order (a census before a stocking event of the same day).
///
/// Animals keep the day they entered; at each census the lost ones leave
/// (oldest first, which does not change any risk set), and those still
/// present after the last census are censored on that day.
pub fn cage_history(events: &[Handling], rule: MissingRule) -> CageHistory {
    let mut h = CageHistory::default();
    // Animals present, by the day they entered.
    let mut groups: Vec<(i64, u64)> = Vec::new();
    let mut interval_start = 0i64;
    let mut last_census: Option<i64> = None;
    let mut survival = 1.0f64;
    // Animal-days in the current interval of the animals present: from the
    // interval's start or their entry, whichever is later.
    let exposed = |groups: &[(i64, u64)], from: i64, day: i64| -> f64 {
        groups
            .iter()
            .map(|(entry, k)| *k as f64 * (day - from.max(*entry)) as f64)
            .sum()
    };
    for e in events {
        match *e {
            Handling::Added { day, count } => {
                if groups.is_empty() {
                    interval_start = day;
                }
                h.first_day.get_or_insert(day);
                h.added += count;
                groups.push((day, count));
            }
            Handling::Removed { day, count } => {
                let present: u64 = groups.iter().map(|g| g.1).sum();
                if count > present {
                    h.notes.push(format!(
                        "day {day}: {count} removed where {present} were present; {present} counted"
                    ));
                }
                for (entry, n) in take(&mut groups, count.min(present)) {
                    h.animal_days += n as f64 * (day - interval_start.max(entry)) as f64;
                    push_spell(&mut h.spells, entry, day, n, false);
                }
                h.removed += count.min(present);
                h.censored += count.min(present);
            }
            Handling::Counted { day, alive, dead } => {
                let n: u64 = groups.iter().map(|g| g.1).sum();
                if n == 0 {
                    if alive > 0 {
                        h.notes.push(format!(
                            "day {day}: {alive} counted alive where none were stocked; the census is left out"
                        ));
                    }
                    continue;
                }
                if alive > n {
                    h.notes.push(format!(
                        "day {day}: {alive} counted alive where at most {n} can be; {n} used"
                    ));
                }
                let a = alive.min(n);
                let losses = n - a;
                let deaths = match rule {
                    MissingRule::Dead => losses,
                    MissingRule::Censored => dead.unwrap_or(0).min(losses),
                };
                let censored = losses - deaths;
                let length = (day - interval_start) as f64;
                let exposure = exposed(&groups, interval_start, day) - losses as f64 * length / 2.0;
                h.animal_days += exposure.max(0.0);
                for (entry, k) in take(&mut groups, deaths) {
                    push_spell(&mut h.spells, entry, day, k, true);
                }
                for (entry, k) in take(&mut groups, censored) {
                    push_spell(&mut h.spells, entry, day, k, false);
                }
                survival *= 1.0 - deaths as f64 / n as f64;
                h.deaths += deaths;
                h.censored += censored;
                h.censuses.push(CensusStep {
                    day,
                    at_risk: n,
                    alive: a,
                    deaths,
                    censored,
                    survival,
                });
                interval_start = day;
                last_census = Some(day);
            }
        }
    }
    // Seen alive at the last census: censored there. Animals added after it
    // were never followed and add nothing.
    if let Some(last) = last_census {
        for (entry, k) in groups {
            push_spell(&mut h.spells, entry, last, k, false);
        }
    }
    h
}

/// Take `count` animals from the groups, oldest first.
fn take(groups: &mut Vec<(i64, u64)>, mut count: u64) -> Vec<(i64, u64)> {
    let mut out = Vec::new();
    for g in groups.iter_mut() {
        if count == 0 {
            break;
        }
        let k = g.1.min(count);
        if k > 0 {
            out.push((g.0, k));
            g.1 -= k;
            count -= k;
        }
    }
    groups.retain(|g| g.1 > 0);
    out
}

fn push_spell(spells: &mut Vec<Spell>, entry: i64, exit: i64, count: u64, event: bool) {
    // An animal seen on the day it entered adds nothing to any risk set.
    if count > 0 && exit > entry {
        spells.push(Spell {
            entry: entry as f64,
            exit: exit as f64,
            count,
            event,
        });
    }
}

/// Survival of one stocked taxon in one cage (analysis table `cage_survival`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CageSurvivalRow {
    #[serde(flatten)]
    pub cage: CageRef,
    pub taxon_id: TaxonId,
    pub taxon: String,
    pub stocked: i64,
    pub restocked: i64,
    pub removed: i64,
    pub first_day: i64,
    pub last_census_day: Option<i64>,
    pub alive_last: Option<i64>,
    pub deaths: i64,
    pub censored: i64,
    pub proportion_recovered: Option<f64>,
    pub daily_survival: Option<f64>,
    pub daily_hazard: Option<f64>,
    pub animal_days: f64,
    pub mayfield_daily_mortality: Option<f64>,
    pub mayfield_daily_survival: Option<f64>,
    pub mayfield_period_survival: Option<f64>,
    pub missing_counted_as: MissingRule,
}

/// One step of a treatment's Kaplan–Meier curve (analysis table
/// `survival_curve`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SurvivalCurveRow {
    pub treatment_id: TreatmentId,
    pub treatment: String,
    pub taxon_id: TaxonId,
    pub taxon: String,
    pub day: i64,
    pub at_risk: i64,
    pub deaths: i64,
    pub censored: i64,
    pub survival: f64,
    pub greenwood_variance: Option<f64>,
    pub se: Option<f64>,
    pub ci_low: Option<f64>,
    pub ci_high: Option<f64>,
    pub missing_counted_as: MissingRule,
}

/// A taxon stocked in a cage: its numbers and its history.
#[derive(Debug, Clone)]
pub(crate) struct Stocked {
    pub taxon: TaxonId,
    /// Animals stocked initially (N_0).
    pub stocked: i64,
    /// Animals restocked.
    pub restocked: i64,
    pub history: CageHistory,
}

/// Every stocked taxon of every cage, by (cage, taxon code).
pub(crate) type Histories = BTreeMap<(usize, String), Stocked>;

/// The survival record of every stocked taxon in every cage.
pub(crate) fn cage_histories(season: &Season, rule: MissingRule, notes: &mut Notes) -> Histories {
    let mut out = BTreeMap::new();
    for (cage, label) in season.cages.iter().enumerate().map(|(i, c)| (i, &c.label)) {
        // (day, order within day, handling): censuses (0) before stocking (1).
        let mut by_taxon: BTreeMap<TaxonId, Vec<(i64, u8, usize, Handling)>> = BTreeMap::new();
        let mut initial: BTreeMap<TaxonId, (i64, i64)> = BTreeMap::new();
        let events = season.stocking.get(&cage).map_or(&[][..], |v| v.as_slice());
        let mut unstocked: BTreeSet<String> = BTreeSet::new();
        for (seq, (day, e)) in events.iter().enumerate() {
            let count = e.count.max(0) as u64;
            let ever_added = events.iter().any(|(_, x)| {
                x.taxon_id == e.taxon_id && x.kind != StockingKind::Removal && x.count > 0
            });
            if !ever_added {
                // A stray animal taken out of a cage that was never stocked with it.
                unstocked.insert(format!(
                    "cage {label}: {} removed on day {day} but never stocked there; left out of survival",
                    season.taxon_code(e.taxon_id)
                ));
                continue;
            }
            let handling = match e.kind {
                StockingKind::Initial | StockingKind::Restock => {
                    let totals = initial.entry(e.taxon_id).or_default();
                    if e.kind == StockingKind::Initial {
                        totals.0 += e.count;
                    } else {
                        totals.1 += e.count;
                    }
                    Handling::Added { day: *day, count }
                }
                StockingKind::Removal => Handling::Removed { day: *day, count },
            };
            by_taxon
                .entry(e.taxon_id)
                .or_default()
                .push((*day, 1, seq, handling));
        }
        for v in season
            .visits
            .iter()
            .filter(|v| v.cage == cage && v.kind == VisitKind::Census)
        {
            for c in season.census.get(&v.id).into_iter().flatten() {
                let Some(list) = by_taxon.get_mut(&c.taxon_id) else {
                    if c.alive.unwrap_or(0) > 0 {
                        unstocked.insert(format!(
                            "cage {label}: {} found alive on day {} but never stocked there; left out of survival",
                            season.taxon_code(c.taxon_id),
                            v.day
                        ));
                    }
                    continue;
                };
                let Some(alive) = c.alive else {
                    notes.push(format!(
                        "cage {label} day {}: {} alive not assessed; the census is skipped",
                        v.day,
                        season.taxon_code(c.taxon_id)
                    ));
                    continue;
                };
                list.push((
                    v.day,
                    0,
                    0,
                    Handling::Counted {
                        day: v.day,
                        alive: alive.max(0) as u64,
                        dead: c.dead.map(|d| d.max(0) as u64),
                    },
                ));
            }
        }
        notes.extend(unstocked);
        for (taxon, mut list) in by_taxon {
            list.sort_by_key(|(day, order, seq, _)| (*day, *order, *seq));
            let handlings: Vec<Handling> = list.into_iter().map(|x| x.3).collect();
            let history = cage_history(&handlings, rule);
            let code = season.taxon_code(taxon);
            for n in &history.notes {
                notes.push(format!("cage {label}, {code}: {n}"));
            }
            let (stocked, restocked) = initial.get(&taxon).copied().unwrap_or_default();
            out.insert(
                (cage, code),
                Stocked {
                    taxon,
                    stocked,
                    restocked,
                    history,
                },
            );
        }
    }
    out
}

/// Per-cage survival rows.
pub(crate) fn cage_survival_rows(
    season: &Season,
    histories: &Histories,
    rule: MissingRule,
) -> Result<Vec<CageSurvivalRow>> {
    let mut rows = Vec::new();
    for ((cage, code), s) in histories {
        let h = &s.history;
        let Some(first_day) = h.first_day else {
            continue;
        };
        let last = h.censuses.last();
        let days = last.map(|c| (c.day - first_day) as f64);
        let rate = match (last, days) {
            (Some(c), Some(t)) => constant_hazard(c.survival, t)?,
            _ => None,
        };
        let exposure = mayfield(h.deaths as f64, h.animal_days);
        rows.push(CageSurvivalRow {
            cage: CageRef::of(season, *cage),
            taxon_id: s.taxon,
            taxon: code.clone(),
            stocked: s.stocked,
            restocked: s.restocked,
            removed: h.removed as i64,
            first_day,
            last_census_day: last.map(|c| c.day),
            alive_last: last.map(|c| c.alive as i64),
            deaths: h.deaths as i64,
            censored: h.censored as i64,
            proportion_recovered: last.map(|c| c.survival),
            daily_survival: rate.map(|r| r.daily_survival),
            daily_hazard: rate.map(|r| r.hazard),
            animal_days: h.animal_days,
            mayfield_daily_mortality: exposure.map(|e| e.daily_mortality),
            mayfield_daily_survival: exposure.map(|e| e.daily_survival),
            mayfield_period_survival: match (exposure, days) {
                (Some(e), Some(t)) => Some(e.survival_over(t)),
                _ => None,
            },
            missing_counted_as: rule,
        });
    }
    Ok(rows)
}

/// Kaplan–Meier curves per treatment and stocked taxon.
pub(crate) fn survival_curve_rows(
    season: &Season,
    histories: &Histories,
    rule: MissingRule,
) -> Result<Vec<SurvivalCurveRow>> {
    let mut pooled: BTreeMap<(usize, String), (TaxonId, Vec<Spell>)> = BTreeMap::new();
    for ((cage, code), s) in histories {
        let Some(t) = season.cages[*cage].treatment else {
            continue;
        };
        pooled
            .entry((t, code.clone()))
            .or_insert_with(|| (s.taxon, Vec::new()))
            .1
            .extend(s.history.spells.iter().copied());
    }
    let mut rows = Vec::new();
    for ((t, code), (taxon, spells)) in pooled {
        let treatment = &season.treatments[t];
        for s in kaplan_meier(&spells)? {
            rows.push(SurvivalCurveRow {
                treatment_id: treatment.id,
                treatment: treatment.code.clone(),
                taxon_id: taxon,
                taxon: code.clone(),
                day: s.time.round() as i64,
                at_risk: s.at_risk as i64,
                deaths: s.events as i64,
                censored: s.censored as i64,
                survival: s.survival,
                greenwood_variance: s.variance,
                se: s.se,
                ci_low: s.ci_low,
                ci_high: s.ci_high,
                missing_counted_as: rule,
            });
        }
    }
    Ok(rows)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64) {
        assert!((a - b).abs() < 5e-7, "{a} vs {b}");
    }

    #[test]
    fn constant_hazard_check_value() {
        // docs/methods.md §6 check value (computed; common practice formulas):
        // 6 of 10 at day 21 → S_d 0.975968, mortality 0.024032, λ 0.024325.
        let r = constant_hazard(6.0 / 10.0, 21.0).unwrap().unwrap();
        close(r.daily_survival, 0.975968);
        close(r.daily_mortality, 0.024032);
        close(r.hazard, 0.024325);
        assert!(constant_hazard(1.2, 21.0).is_err());
        assert_eq!(constant_hazard(0.5, 0.0).unwrap(), None);
    }

    #[test]
    fn mayfield_check_value() {
        // docs/methods.md §6 check value (computed; Mayfield 1961, 1975, from
        // memory): 10 animals, 3 deaths in a 7-day interval → 59.5
        // animal-days, m 0.050420, 7-day survival 0.696178.
        let days = interval_exposure(10.0, 3.0, 7.0);
        assert_eq!(days, 59.5);
        let m = mayfield(3.0, days).unwrap();
        close(m.daily_mortality, 0.050420);
        close(m.survival_over(7.0), 0.696178);
        assert_eq!(mayfield(0.0, 0.0), None);
    }

    #[test]
    fn cage_history_gives_the_same_mayfield_exposure() {
        // The same interval as docs/methods.md §6 (Mayfield), through the cage
        // history: 10 stocked on day 0, 7 found alive on day 7.
        let h = cage_history(
            &[
                Handling::Added { day: 0, count: 10 },
                Handling::Counted {
                    day: 7,
                    alive: 7,
                    dead: Some(1),
                },
            ],
            MissingRule::Dead,
        );
        assert_eq!(h.animal_days, 59.5);
        assert_eq!(h.deaths, 3);
        close(h.censuses[0].survival, 0.7);
    }

    #[test]
    fn kaplan_meier_check_value() {
        // docs/methods.md §6 check value (computed; Kaplan & Meier 1958,
        // Greenwood variance): checks at days 7, 14, 21; at risk 10, 7, 6;
        // deaths 2, 1, 2; one animal missing after day 7 censored →
        // Ŝ 0.800000, 0.685714, 0.457143; Var at 21 = 0.027615.
        let mut spells = vec![
            Spell {
                entry: 0.0,
                exit: 7.0,
                count: 2,
                event: true,
            },
            Spell {
                entry: 0.0,
                exit: 7.0,
                count: 1,
                event: false,
            },
            Spell {
                entry: 0.0,
                exit: 14.0,
                count: 1,
                event: true,
            },
            Spell {
                entry: 0.0,
                exit: 21.0,
                count: 2,
                event: true,
            },
        ];
        spells.push(Spell {
            entry: 0.0,
            exit: 21.0,
            count: 4,
            event: false,
        });
        let km = kaplan_meier(&spells).unwrap();
        let at_risk: Vec<u64> = km.iter().map(|s| s.at_risk).collect();
        assert_eq!(at_risk, vec![10, 7, 6]);
        close(km[0].survival, 0.8);
        close(km[1].survival, 0.685714);
        close(km[2].survival, 0.457143);
        close(km[2].variance.unwrap(), 0.027615);
    }

    #[test]
    fn the_same_check_value_from_counts_in_a_cage() {
        // docs/methods.md §6 Kaplan–Meier check (computed), entered as censuses:
        // the missing animal is censored under MissingRule::Censored.
        let h = cage_history(
            &[
                Handling::Added { day: 0, count: 10 },
                Handling::Counted {
                    day: 7,
                    alive: 7,
                    dead: Some(2),
                },
                Handling::Counted {
                    day: 14,
                    alive: 6,
                    dead: Some(1),
                },
                Handling::Counted {
                    day: 21,
                    alive: 4,
                    dead: Some(2),
                },
            ],
            MissingRule::Censored,
        );
        let km = kaplan_meier(&h.spells).unwrap();
        let s: Vec<f64> = km.iter().map(|k| k.survival).collect();
        close(s[0], 0.8);
        close(s[1], 0.685714);
        close(s[2], 0.457143);
        close(km[2].variance.unwrap(), 0.027615);
        // The cage's own product-limit estimate is the same curve.
        close(h.censuses[2].survival, 0.457143);
    }

    #[test]
    fn restocked_animals_enter_on_their_stocking_day() {
        // Staggered entry (Pollock et al. 1989, from memory): 10 stocked on day
        // 0; 4 found alive on day 3 and 6 added; 8 alive on day 6.
        let h = cage_history(
            &[
                Handling::Added { day: 0, count: 10 },
                Handling::Counted {
                    day: 3,
                    alive: 4,
                    dead: None,
                },
                Handling::Added { day: 3, count: 6 },
                Handling::Counted {
                    day: 6,
                    alive: 8,
                    dead: None,
                },
            ],
            MissingRule::Dead,
        );
        assert_eq!(h.added, 16);
        assert_eq!(h.censuses[1].at_risk, 10);
        // Product-limit: 0.4 × 0.8 = 0.32 (not 8 / 16 and not 8 / 10).
        close(h.censuses[1].survival, 0.32);
        let km = kaplan_meier(&h.spells).unwrap();
        assert_eq!(km.len(), 2);
        assert_eq!((km[1].at_risk, km[1].events), (10, 2));
        close(km[1].survival, 0.32);
    }

    #[test]
    fn impossible_counts_are_capped_and_noted() {
        let h = cage_history(
            &[
                // Counted before anything was stocked (census before stocking).
                Handling::Counted {
                    day: 0,
                    alive: 2,
                    dead: None,
                },
                Handling::Added { day: 0, count: 10 },
                Handling::Counted {
                    day: 3,
                    alive: 12,
                    dead: None,
                },
            ],
            MissingRule::Dead,
        );
        assert_eq!(h.censuses.len(), 1);
        assert_eq!(h.censuses[0].alive, 10);
        assert_eq!(h.notes.len(), 2, "{:?}", h.notes);
        assert!(h.notes[1].contains("12 counted alive where at most 10"));
    }

    #[test]
    fn a_spell_must_end_after_it_starts() {
        let err = kaplan_meier(&[Spell {
            entry: 5.0,
            exit: 5.0,
            count: 1,
            event: true,
        }])
        .unwrap_err()
        .to_string();
        assert!(err.contains("spell.exit") && err.contains("\"5\""), "{err}");
    }

    proptest::proptest! {
        /// Kaplan–Meier never rises, stays within [0, 1], and its interval
        /// holds the estimate (Kaplan & Meier 1958).
        #[test]
        fn kaplan_meier_is_a_survival_curve(
            animals in proptest::collection::vec((0u8..10, 1u8..30, proptest::bool::ANY), 1..80)
        ) {
            let spells: Vec<Spell> = animals
                .iter()
                .map(|(entry, length, event)| Spell {
                    entry: f64::from(*entry),
                    exit: f64::from(*entry) + f64::from(*length),
                    count: 1,
                    event: *event,
                })
                .collect();
            let km = kaplan_meier(&spells).unwrap();
            let mut previous = 1.0;
            for s in &km {
                proptest::prop_assert!(s.survival <= previous && s.survival >= 0.0);
                proptest::prop_assert!(s.events + s.censored <= s.at_risk);
                if let (Some(lo), Some(hi)) = (s.ci_low, s.ci_high) {
                    proptest::prop_assert!(lo <= s.survival + 1e-12 && s.survival <= hi + 1e-12);
                }
                previous = s.survival;
            }
        }

        /// Counted animals: the cage's proportion recovered never rises and
        /// equals N_t / N_0 when nothing is restocked (common practice).
        #[test]
        fn proportion_recovered_is_alive_over_stocked_without_restocking(
            losses in proptest::collection::vec(0u64..4, 1..10)
        ) {
            let mut events = vec![Handling::Added { day: 0, count: 30 }];
            let mut alive = 30u64;
            for (i, l) in losses.iter().enumerate() {
                alive = alive.saturating_sub(*l);
                events.push(Handling::Counted { day: 3 * (i as i64 + 1), alive, dead: None });
            }
            let h = cage_history(&events, MissingRule::Dead);
            if let Some(last) = h.censuses.last() {
                proptest::prop_assert!((last.survival - alive as f64 / 30.0).abs() < 1e-12);
            }
            for w in h.censuses.windows(2) {
                proptest::prop_assert!(w[1].survival <= w[0].survival);
            }
        }
    }
}
