//! The restock rule of a stocking plan, and the animals a census accounts for.

use crate::model::{StockingKind, StockingPlan};

/// How many animals a census calls for: when fewer than the plan's restock
/// threshold are alive and no restocking of the taxon is recorded in the
/// cage that day, as many as bring the cage back to the plan's initial
/// count. The sheet suggests it and `counts.restock_due` raises it.
pub fn restock_due(plan: &StockingPlan, alive: i64, restocked_that_day: bool) -> Option<i64> {
    let threshold = plan.restock_below?;
    (alive < threshold && !restocked_that_day).then_some(plan.initial_count - alive)
}

/// One stocking event of a taxon in a cage, by local date.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Put {
    /// The event's field day.
    pub date: chrono::NaiveDate,
    /// Initial, restock or removal.
    pub kind: StockingKind,
    /// How many.
    pub count: i64,
}

/// How many animals of a taxon a census on `date` must account for (alive +
/// dead + missing): those alive at the previous census (on `last.0`, with
/// `last.1` alive), or all stocked before when there was none, plus what
/// was put in and minus what was taken out from that census's day up to the
/// day before `date` (a census comes before the day's restocking, so
/// stocking on the census day itself counts from the next census on).
/// `None` when nothing was ever put in.
pub fn at_risk(
    events: &[Put],
    last: Option<(chrono::NaiveDate, i64)>,
    date: chrono::NaiveDate,
) -> Option<i64> {
    let since = |e: &&Put| match last {
        Some((day, _)) => e.date >= day && e.date < date,
        None => e.date < date,
    };
    let moved: i64 = events
        .iter()
        .filter(since)
        .map(|e| match e.kind {
            StockingKind::Removal => -e.count,
            StockingKind::Initial | StockingKind::Restock => e.count,
        })
        .sum();
    match last {
        Some((_, alive)) => Some(alive + moved),
        None if events.iter().any(|e| e.date < date) => Some(moved),
        None => None,
    }
}

#[cfg(test)]
mod at_risk_tests {
    use super::*;
    use chrono::NaiveDate;

    fn d(day: u32) -> NaiveDate {
        NaiveDate::from_ymd_opt(2026, 5, day).expect("a date")
    }

    /// The bookkeeping of a cage (common practice: animals at risk over an
    /// interval are those alive at its start plus those added in it).
    #[test]
    fn the_animals_a_census_accounts_for() {
        let put = |day, kind, count| Put {
            date: d(day),
            kind,
            count,
        };
        let events = [
            put(1, StockingKind::Initial, 10),
            put(8, StockingKind::Restock, 3),
            put(9, StockingKind::Removal, 1),
            put(12, StockingKind::Restock, 2),
        ];
        // No census yet: everything stocked before the day.
        assert_eq!(at_risk(&events, None, d(8)), Some(10));
        // Census on day 8 found 7: the restock of day 8 and the removal of
        // day 9 count for the census of day 12 (7 + 3 - 1); the restock of
        // day 12 itself counts from the next census on.
        assert_eq!(at_risk(&events, Some((d(8), 7)), d(12)), Some(9));
        // Nothing stocked before the first day: nothing to account for.
        assert_eq!(at_risk(&events, None, d(1)), None);
    }
}
