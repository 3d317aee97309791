//! The restock rule of a stocking plan.

use crate::model::StockingPlan;

/// How many animals a census calls for: when fewer than the plan's restock
/// threshold are alive and no restocking of the taxon is recorded in the
/// cage that day, as many as bring the cage back to the plan's initial
/// count. The sheet suggests it and `counts.restock_due` raises it.
pub fn restock_due(plan: &StockingPlan, alive: i64, restocked_that_day: bool) -> Option<i64> {
    let threshold = plan.restock_below?;
    (alive < threshold && !restocked_that_day).then_some(plan.initial_count - alive)
}
