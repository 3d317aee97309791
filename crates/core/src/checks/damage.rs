//! Damage rules: each row's entry against the protocol, damage that decreases
//! on a tagged leaf, leaves not scored, and damage where no herbivores were
//! stocked.
//!
//! Damage on a tagged leaf is cumulative: it cannot decrease between visits
//! unless the leaf was lost or replaced, which is a coded fate, not a zero
//! (docs/methods.md section 3; common practice).

use std::collections::HashMap;

use super::{EPSILON, Flag, Rule, Season, num};
use crate::model::*;
use crate::season::schedule;

/// A damage row whose entry does not fit the protocol.
pub const METHOD: Rule = Rule {
    id: "damage.method",
    family: CheckFamily::Damage,
    severity: Severity::Error,
    looks_for: "a damage row whose entry does not fit the protocol's method (class or percent), or whose damage_pct does not follow from its entry",
};
/// A class code not on the damage scale.
pub const NOT_ON_SCALE: Rule = Rule {
    id: "damage.not_on_scale",
    family: CheckFamily::Damage,
    severity: Severity::Error,
    looks_for: "a class code that is not a class of the protocol's damage scale",
};
/// Damage lower than at the leaf's previous scoring.
pub const DECREASE: Rule = Rule {
    id: "damage.decrease",
    family: CheckFamily::Damage,
    severity: Severity::Error,
    looks_for: "damage on a tagged leaf lower than at its previous scoring while the leaf has no fate (lost or replaced)",
};
/// A tagged leaf not scored at a damage visit.
pub const LEAF_UNSCORED: Rule = Rule {
    id: "damage.leaf_unscored",
    family: CheckFamily::Damage,
    severity: Severity::Error,
    looks_for: "a tagged leaf with no damage row at a scheduled damage visit of its cage, and no fate by then",
};
/// Damage in a treatment without herbivores.
pub const IN_CONTROL: Rule = Rule {
    id: "damage.in_control",
    family: CheckFamily::Damage,
    severity: Severity::Warning,
    looks_for: "damage above the limit (default 15 %) on a leaf in a treatment without herbivores",
};

/// The damage rules.
pub const RULES: &[Rule] = &[METHOD, NOT_ON_SCALE, DECREASE, LEAF_UNSCORED, IN_CONTROL];

/// Raise the damage flags of the season.
pub fn check(season: &Season, out: &mut Vec<Flag>) {
    let Some(protocol) = &season.damage_protocol else {
        return;
    };
    for (cage, visits, leaves) in season.each_cage() {
        let leaf_by_id: HashMap<LeafId, &TaggedLeaf> = leaves.iter().map(|l| (l.id, l)).collect();
        let herbivores = cage.treatment.as_ref().is_none_or(|t| t.herbivores);
        // The last scored damage of each leaf: (percent, row, day, entry in words).
        let mut last: HashMap<LeafId, (f64, DamageRecordId, i64, String)> = HashMap::new();
        for visit in visits.iter().filter(|v| v.kind == VisitKind::Damage) {
            let day = season.visit_day(visit);
            let date = visit.visited_at.date_naive();
            let rows = Season::rows_of(&season.damage, visit.id);
            for row in rows {
                let leaf = leaf_by_id.get(&row.leaf_id).copied();
                let tag = leaf.map_or_else(|| row.leaf_id.to_string(), |l| l.tag_label.clone());
                let Some(entry) = check_entry(season, protocol, cage, day, &tag, row, out) else {
                    continue;
                };
                let Some(pct) = row.damage_pct else { continue };
                if let Some((before, before_id, before_day, before_entry)) = last.get(&row.leaf_id)
                    && pct < before - EPSILON
                    && leaf.is_some_and(|l| l.fate.is_none())
                {
                    out.push(
                        DECREASE
                            .flag(
                                cage,
                                day,
                                row.id,
                                format!(
                                    "Leaf {tag} scored {entry} on day {day}, lower than {before_entry} on day {before_day}; damage on a tagged leaf only adds up."
                                ),
                                "Re-score the leaf; if it is not the same leaf (tag moved, leaf lost or replaced), record the leaf's fate instead.".to_owned(),
                            )
                            .related_to(*before_id),
                    );
                }
                last.insert(row.leaf_id, (pct, row.id, day, entry));
                let limit = season.limits.control_damage_pct;
                if !herbivores && pct > limit + EPSILON {
                    out.push(IN_CONTROL.flag(
                        cage,
                        day,
                        row.id,
                        format!(
                            "Leaf {tag} has {} % damage on day {day} in treatment {}, which has no herbivores (more than {} % is unusual there).",
                            num(pct),
                            cage.treatment.as_ref().map_or("-", |t| t.code.as_str()),
                            num(limit)
                        ),
                        "Check the score; if it is right, look for herbivores that got into the cage and confirm the flag with a note.".to_owned(),
                    ));
                }
            }
            // Only a damage visit that fulfils a planned one must score
            // every leaf (the schedule's one rule: recorded for that day, or
            // for none and made within its grace days).
            if !schedule::fulfils_any(&season.calendar, &season.schedule, visit) {
                continue;
            }
            for leaf in leaves {
                let in_place = leaf.tagged_on <= date
                    && match (leaf.fate, leaf.fate_on) {
                        (None, _) => true,
                        (Some(_), Some(on)) => on > date,
                        (Some(_), None) => false,
                    };
                if in_place && !rows.iter().any(|r| r.leaf_id == leaf.id) {
                    out.push(
                        LEAF_UNSCORED
                            .flag(
                                cage,
                                day,
                                leaf.id,
                                format!(
                                    "Tagged leaf {} has no damage score at the damage visit of day {day} and no fate.",
                                    leaf.tag_label
                                ),
                                "Score the leaf, or if it is gone, record its fate (lost, or replaced with a newly tagged leaf).".to_owned(),
                            )
                            .related_to(visit.id),
                    );
                }
            }
        }
    }
}

/// Check a row's entry; return it in words when it gives a usable percent.
fn check_entry(
    season: &Season,
    protocol: &DamageProtocol,
    cage: &super::Cage,
    day: i64,
    tag: &str,
    row: &DamageRecord,
    out: &mut Vec<Flag>,
) -> Option<String> {
    let flag = |rule: &Rule, message: String, fix: &str| {
        rule.flag(cage, day, row.id, message, fix.to_owned())
    };
    let method_fix =
        "Re-enter the score as the protocol records it, so that the percent is derived again.";
    let (expected, entry) = match protocol.method {
        DamageMethod::Class => {
            if let Some(v) = row.value_pct {
                out.push(flag(
                    &METHOD,
                    format!("Leaf {tag} on day {day} has a percent of {}, but protocol {} records damage classes.", num(v), protocol.code),
                    method_fix,
                ));
                return None;
            }
            match &row.class_code {
                None => (None, String::new()),
                Some(code) => match season.damage_classes.get(code) {
                    None => {
                        let mut classes: Vec<&ScaleClass> =
                            season.damage_classes.values().collect();
                        classes.sort_by_key(|c| c.sort_order);
                        let codes: Vec<&str> = classes.iter().map(|c| c.code.as_str()).collect();
                        out.push(flag(
                            &NOT_ON_SCALE,
                            format!(
                                "Leaf {tag} on day {day} has class \"{code}\", which is not a class of the damage scale (classes: {}).",
                                codes.join(", ")
                            ),
                            "Enter the class that was meant; the scale's classes are listed in the message.",
                        ));
                        return None;
                    }
                    Some(class) => (
                        Some(class.midpoint_pct),
                        format!("class {code} ({} %)", num(class.midpoint_pct)),
                    ),
                },
            }
        }
        DamageMethod::Percent => {
            if let Some(code) = &row.class_code {
                out.push(flag(
                    &METHOD,
                    format!("Leaf {tag} on day {day} has class \"{code}\", but protocol {} records percent leaf area.", protocol.code),
                    method_fix,
                ));
                return None;
            }
            (
                row.value_pct,
                row.value_pct
                    .map(|v| format!("{} %", num(v)))
                    .unwrap_or_default(),
            )
        }
    };
    match (expected, row.damage_pct) {
        (None, None) => None,
        (Some(e), Some(d)) if (e - d).abs() <= EPSILON => Some(entry),
        (Some(e), Some(d)) => {
            out.push(flag(
                &METHOD,
                format!("Leaf {tag} on day {day} has damage_pct {} %, but its entry, {entry}, gives {} %.", num(d), num(e)),
                method_fix,
            ));
            None
        }
        (Some(_), None) => {
            out.push(flag(
                &METHOD,
                format!("Leaf {tag} on day {day} has the entry {entry} but no damage_pct."),
                method_fix,
            ));
            None
        }
        (None, Some(d)) => {
            out.push(flag(
                &METHOD,
                format!(
                    "Leaf {tag} on day {day} has damage_pct {} % but no entry to derive it from.",
                    num(d)
                ),
                method_fix,
            ));
            None
        }
    }
}
