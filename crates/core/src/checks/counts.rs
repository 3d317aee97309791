//! Count rules: animals found against what was stocked, animals where the
//! treatment has none, censuses before stocking, and restocking due.
//!
//! What can be in a cage at a census is what was stocked and restocked before
//! it, less what was removed and what was found dead at earlier censuses (a
//! dead animal is taken out when found); animals found alive plus those found
//! dead at this census cannot exceed it. Missing animals are not subtracted:
//! they may turn up again (common practice).

use std::collections::{HashMap, HashSet};

use chrono::NaiveDate;

use super::{Flag, Rule, Season};
use crate::model::*;
use crate::season::stocking;

/// More animals than can be in the cage.
pub const TOO_MANY: Rule = Rule {
    id: "counts.too_many",
    family: CheckFamily::Counts,
    severity: Severity::Error,
    looks_for: "more animals found alive plus found dead at a census than can be in the cage: stocked + restocked - removed - found dead at earlier censuses",
};
/// Animals in a treatment that should have none.
pub const CONTAMINATION: Rule = Rule {
    id: "counts.contamination",
    family: CheckFamily::Counts,
    severity: Severity::Error,
    looks_for: "herbivores found (alive or dead) in a treatment without herbivores, or predators in a treatment without predators",
};
/// A census before the cage was stocked.
pub const BEFORE_STOCKING: Rule = Rule {
    id: "counts.before_stocking",
    family: CheckFamily::Counts,
    severity: Severity::Error,
    looks_for: "a census before the cage's first initial stocking (or with no initial stocking recorded) in a treatment that stocks animals",
};
/// Fewer alive than the restock threshold.
pub const RESTOCK_DUE: Rule = Rule {
    id: "counts.restock_due",
    family: CheckFamily::Counts,
    severity: Severity::Notice,
    looks_for: "fewer animals alive than the stocking plan's restock threshold, with no restocking of that taxon in the cage that day",
};

/// The count rules.
pub const RULES: &[Rule] = &[TOO_MANY, CONTAMINATION, BEFORE_STOCKING, RESTOCK_DUE];

/// What has gone into and out of a cage for one taxon so far.
#[derive(Debug, Default, Clone, Copy)]
struct Ledger {
    stocked: i64,
    restocked: i64,
    removed: i64,
    /// Found dead at censuses on earlier days.
    dead_before: i64,
    /// Found dead at censuses of the current day (a census entered twice on
    /// one day must not subtract its own dead twice).
    dead_today: i64,
}

impl Ledger {
    fn can_be_there(&self) -> i64 {
        self.stocked + self.restocked - self.removed - self.dead_before
    }
}

/// Raise the count flags of the season.
pub fn check(season: &Season, out: &mut Vec<Flag>) {
    for (cage, visits, _) in season.each_cage() {
        let Some(treatment) = &cage.treatment else {
            continue;
        };
        let stocks_animals = season
            .plans
            .iter()
            .any(|((t, _), p)| *t == treatment.id && p.initial_count > 0);
        let events = |v: &Visit| Season::rows_of(&season.stocking, v.id);
        let first_stocking = visits
            .iter()
            .find(|v| events(v).iter().any(|e| e.kind == StockingKind::Initial));
        let restocked_on: HashSet<(NaiveDate, TaxonId)> = visits
            .iter()
            .flat_map(|v| {
                events(v)
                    .iter()
                    .filter(|e| e.kind == StockingKind::Restock && e.count > 0)
                    .map(move |e| (v.visited_at.date_naive(), e.taxon_id))
            })
            .collect();
        let mut ledgers: HashMap<TaxonId, Ledger> = HashMap::new();
        let mut current: Option<NaiveDate> = None;
        for visit in visits {
            let date = visit.visited_at.date_naive();
            if current != Some(date) {
                for l in ledgers.values_mut() {
                    l.dead_before += l.dead_today;
                    l.dead_today = 0;
                }
                current = Some(date);
            }
            let day = season.visit_day(visit);
            if visit.kind == VisitKind::Census {
                if stocks_animals {
                    let message = match first_stocking {
                        None => Some(format!(
                            "The census of day {day} comes before any stocking: no initial stocking is recorded for {}, whose treatment {} stocks animals.",
                            cage.label, treatment.code
                        )),
                        Some(s) if visit.visited_at < s.visited_at => Some(format!(
                            "The census of day {day} ({}) comes before the first stocking of the cage on day {} ({}).",
                            visit.visited_at.format("%Y-%m-%d %H:%M"),
                            season.visit_day(s),
                            s.visited_at.format("%Y-%m-%d %H:%M")
                        )),
                        Some(_) => None,
                    };
                    if let Some(message) = message {
                        out.push(BEFORE_STOCKING.flag(
                            cage,
                            day,
                            visit.id,
                            message,
                            "Check the dates of the census and of the stocking visit; record the initial stocking if it is missing.".to_owned(),
                        ));
                    }
                }
                for row in Season::rows_of(&season.census, visit.id) {
                    let ledger = ledgers.entry(row.taxon_id).or_default();
                    check_row(
                        season,
                        cage,
                        treatment,
                        day,
                        date,
                        row,
                        ledger,
                        &restocked_on,
                        out,
                    );
                    ledger.dead_today += row.dead.unwrap_or(0);
                }
            }
            // Animals handled at a visit come after its census (count, then restock).
            for e in events(visit) {
                let l = ledgers.entry(e.taxon_id).or_default();
                match e.kind {
                    StockingKind::Initial => l.stocked += e.count,
                    StockingKind::Restock => l.restocked += e.count,
                    StockingKind::Removal => l.removed += e.count,
                }
            }
        }
    }
}

#[allow(clippy::too_many_arguments)] // one census row and everything it is checked against
fn check_row(
    season: &Season,
    cage: &super::Cage,
    treatment: &Treatment,
    day: i64,
    date: NaiveDate,
    row: &Census,
    ledger: &Ledger,
    restocked_on: &HashSet<(NaiveDate, TaxonId)>,
    out: &mut Vec<Flag>,
) {
    let Some(taxon) = season.taxa.get(&row.taxon_id) else {
        return;
    };
    let alive = row.alive.unwrap_or(0);
    let dead = row.dead.unwrap_or(0);
    let unexpected = match taxon.role {
        Role::Herbivore => !treatment.herbivores,
        Role::Predator => treatment.predator_mode == PredatorMode::None,
        Role::Plant => false,
    };
    if unexpected {
        if alive + dead > 0 {
            out.push(CONTAMINATION.flag(
                cage,
                day,
                row.id,
                format!(
                    "{alive} {} found alive and {dead} dead on day {day}, but treatment {} ({}) has no {}s.",
                    taxon.code, treatment.code, treatment.name, taxon.role
                ),
                "Check the count; if the animals were there, remove them (record a removal), find how they got in, and confirm the flag with a note saying so.".to_owned(),
            ));
        }
        return;
    }
    let Some(plan) = season.plans.get(&(treatment.id, row.taxon_id)) else {
        return;
    };
    if row.alive.is_some() || row.dead.is_some() {
        let ceiling = ledger.can_be_there();
        if alive + dead > ceiling {
            out.push(TOO_MANY.flag(
                cage,
                day,
                row.id,
                format!(
                    "{alive} {code} found alive and {dead} dead on day {day}, {} in all, but at most {ceiling} can be in the cage ({} stocked + {} restocked - {} removed - {} found dead before).",
                    alive + dead,
                    ledger.stocked,
                    ledger.restocked,
                    ledger.removed,
                    ledger.dead_before,
                    code = taxon.code,
                ),
                "Recount or correct the count; if animals were added and not recorded, record the stocking event.".to_owned(),
            ));
        }
    }
    if let (Some(alive), Some(threshold)) = (row.alive, plan.restock_below)
        && let Some(target) =
            stocking::restock_due(plan, alive, restocked_on.contains(&(date, row.taxon_id)))
    {
        out.push(RESTOCK_DUE.flag(
            cage,
            day,
            row.id,
            format!(
                "{alive} {} alive on day {day}, below the restock threshold of {threshold}; no restocking is recorded that day.",
                taxon.code
            ),
            format!(
                "Restock {target} {} to bring the cage back to {}, and record the restocking.",
                taxon.code, plan.initial_count
            ),
        ));
    }
}
