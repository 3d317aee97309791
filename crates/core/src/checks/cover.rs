//! Cover rules: each row's entry against the protocol's method and scale, the
//! totals of a survey, overall vegetation against its species, jumps between
//! surveys, and blank surveys.
//!
//! Point-intercept: cover = 100 × hits / pins, and with the first-hit rule the
//! categories (species + ground) take every pin exactly once, so their hits add
//! up to the frame's pins; with the any-hit rule overall vegetation cover lies
//! between the largest species and the sum of species (Elzinga, Salzer &
//! Willoughby 1998; docs/methods.md section 2). Visual estimates of one layer add
//! up to 100 within the protocol's tolerance band (common practice; default
//! ±5 points).

use std::collections::HashMap;

use super::{CoverRow, EPSILON, Flag, Rule, Season, num};
use crate::model::*;

/// A cover row whose entry does not fit the protocol's method.
pub const METHOD: Rule = Rule {
    id: "cover.method",
    family: CheckFamily::Cover,
    severity: Severity::Error,
    looks_for: "a cover row whose entry does not fit the protocol's method (percent, class or pins), or whose cover_pct does not follow from its entry",
};
/// A class code that is not on the scale.
pub const NOT_ON_SCALE: Rule = Rule {
    id: "cover.not_on_scale",
    family: CheckFamily::Cover,
    severity: Severity::Error,
    looks_for: "a class code that is not a class of the protocol's cover scale",
};
/// More pin hits than pins.
pub const PINS_ABOVE_FRAME: Rule = Rule {
    id: "cover.pins_above_frame",
    family: CheckFamily::Cover,
    severity: Severity::Error,
    looks_for: "more pin hits than the frame has pins",
};
/// First-layer total away from 100 % (or from the frame's pins).
pub const TOTAL: Rule = Rule {
    id: "cover.total",
    family: CheckFamily::Cover,
    severity: Severity::Error,
    looks_for: "first-hit pin hits (species + ground) that do not add up to the frame's pins exactly, or a visual first layer (species + ground; overall vegetation + ground when layered) outside 100 % ± the protocol's tolerance",
};
/// Species + ground above 100 % in a protocol without layers.
pub const OVER_100: Rule = Rule {
    id: "cover.over_100",
    family: CheckFamily::Cover,
    severity: Severity::Error,
    looks_for: "species + ground above 100 % + the tolerance in a protocol without layers, where no exact total applies (cover classes: the sum of the classes' lower limits; pins with the any-hit rule)",
};
/// Overall vegetation outside [largest species, sum of species].
pub const VEGETATION: Rule = Rule {
    id: "cover.vegetation",
    family: CheckFamily::Cover,
    severity: Severity::Error,
    looks_for: "overall vegetation cover below the largest species or above the sum of species (layered protocol; visual and class estimates get the tolerance band)",
};
/// A species jumping between consecutive surveys.
pub const CHANGE: Rule = Rule {
    id: "cover.change",
    family: CheckFamily::Cover,
    severity: Severity::Warning,
    looks_for: "a species whose cover changes between consecutive surveys of a cage by more than the limit (default 25 points)",
};
/// A cover row for an animal.
pub const NOT_PLANT: Rule = Rule {
    id: "cover.not_plant",
    family: CheckFamily::Cover,
    severity: Severity::Error,
    looks_for: "a cover row for a taxon that is not a plant",
};
/// A survey with no value at all.
pub const BLANK_SURVEY: Rule = Rule {
    id: "cover.blank_survey",
    family: CheckFamily::Cover,
    severity: Severity::Warning,
    looks_for: "a cover survey in which every value is blank (or that has no rows)",
};

/// The cover rules.
pub const RULES: &[Rule] = &[
    METHOD,
    NOT_ON_SCALE,
    PINS_ABOVE_FRAME,
    TOTAL,
    OVER_100,
    VEGETATION,
    CHANGE,
    NOT_PLANT,
    BLANK_SURVEY,
];

/// Raise the cover flags of the season.
pub fn check(season: &Season, out: &mut Vec<Flag>) {
    let Some(protocol) = &season.cover_protocol else {
        return;
    };
    for (cage, visits, _) in season.each_cage() {
        // The last assessed cover of each species in this cage: (percent, row, day).
        let mut last: HashMap<TaxonId, (f64, CoverRecordId, i64)> = HashMap::new();
        for visit in visits.iter().filter(|v| v.kind == VisitKind::Cover) {
            let day = season.visit_day(visit);
            let rows = Season::rows_of(&season.cover, visit.id);
            let survey = Survey {
                season,
                protocol,
                cage,
                visit,
                day,
                rows,
            };
            for row in rows {
                survey.check_entry(row, out);
                survey.check_taxon(row, out);
            }
            if is_blank(rows) {
                out.push(BLANK_SURVEY.flag(
                    cage,
                    day,
                    visit.id,
                    format!(
                        "The cover survey of day {day} has {} and not one value.",
                        match rows.len() {
                            0 => "no rows".to_owned(),
                            1 => "1 row".to_owned(),
                            n => format!("{n} rows"),
                        }
                    ),
                    "Enter the cover values, or if the cage could not be surveyed that day, confirm the flag with the reason.".to_owned(),
                ));
                continue;
            }
            survey.check_totals(out);
            survey.check_vegetation(out);
            survey.check_changes(&mut last, out);
        }
    }
}

/// Whether a cover survey holds no value at all (no rows, or only blank ones).
pub fn is_blank(rows: &[CoverRow]) -> bool {
    rows.iter().all(|r| r.cover_pct.is_none() && !has_entry(r))
}

/// Whether a row holds any entry (percent, class or hits).
fn has_entry(row: &CoverRow) -> bool {
    row.value_pct.is_some() || row.class_code.is_some() || row.pin_hits.is_some()
}

/// One cover survey being checked.
struct Survey<'a> {
    season: &'a Season,
    protocol: &'a CoverProtocol,
    cage: &'a super::Cage,
    visit: &'a Visit,
    day: i64,
    rows: &'a [CoverRow],
}

impl Survey<'_> {
    /// What a row is about, for messages: a taxon code, a ground category or
    /// overall vegetation.
    fn name(&self, row: &CoverRow) -> String {
        match (&row.taxon_id, row.category.as_deref()) {
            (Some(t), _) => self.season.taxon_code(*t),
            (None, Some(c)) if c == VEGETATION_CATEGORY => "overall vegetation".to_owned(),
            (None, Some(c)) => format!("ground \"{c}\""),
            (None, None) => "a row with neither taxon nor category".to_owned(),
        }
    }

    fn flag(&self, rule: &Rule, row: &CoverRow, message: String, fix: &str) -> Flag {
        rule.flag(self.cage, self.day, row.id, message, fix.to_owned())
    }

    /// The row's entry against the protocol's method and scale.
    fn check_entry(&self, row: &CoverRow, out: &mut Vec<Flag>) {
        let p = self.protocol;
        // The row's name is made only for a flag: most rows raise none.
        let name = || self.name(row);
        let day = self.day;
        let method_fix = "Re-enter the value as the protocol records it (or correct the protocol if the survey used another method).";
        let wrong = |entry: String| {
            format!(
                "{} on day {day} has {entry}, but protocol {} records {}.",
                name(),
                p.code,
                match p.method {
                    CoverMethod::Percent => "percent",
                    CoverMethod::Class => "cover classes",
                    CoverMethod::Pins => "pin hits",
                }
            )
        };
        let stray = match p.method {
            CoverMethod::Percent => row
                .class_code
                .as_ref()
                .map(|c| format!("class code \"{c}\""))
                .or(row.pin_hits.map(|h| format!("{h} pin hits"))),
            CoverMethod::Class => row
                .value_pct
                .map(|v| format!("a percent of {}", num(v)))
                .or(row.pin_hits.map(|h| format!("{h} pin hits"))),
            CoverMethod::Pins => row
                .value_pct
                .map(|v| format!("a percent of {}", num(v)))
                .or(row
                    .class_code
                    .as_ref()
                    .map(|c| format!("class code \"{c}\""))),
        };
        if let Some(entry) = stray {
            out.push(self.flag(&METHOD, row, wrong(entry), method_fix));
            return;
        }
        // The percent the entry gives.
        let derived: Option<f64> = match p.method {
            CoverMethod::Percent => row.value_pct,
            CoverMethod::Class => {
                let Some(code) = row.class_code.as_deref() else {
                    return self.no_entry(row, out);
                };
                let Some(class) = self.season.cover_classes.get(code) else {
                    let mut classes: Vec<&ScaleClass> =
                        self.season.cover_classes.values().collect();
                    classes.sort_by_key(|c| c.sort_order);
                    let codes: Vec<&str> = classes.iter().map(|c| c.code.as_str()).collect();
                    out.push(self.flag(
                        &NOT_ON_SCALE,
                        row,
                        format!(
                            "{} on day {day} has class \"{code}\", which is not a class of the cover scale (classes: {}).",
                            name(),
                            codes.join(", ")
                        ),
                        "Enter the class that was meant; the scale's classes are listed in the message.",
                    ));
                    return;
                };
                Some(class.midpoint_pct)
            }
            CoverMethod::Pins => {
                let Some(hits) = row.pin_hits else {
                    return self.no_entry(row, out);
                };
                let Some(pins) = p.pins_per_frame.filter(|n| *n > 0) else {
                    return;
                };
                if hits > pins {
                    out.push(self.flag(
                        &PINS_ABOVE_FRAME,
                        row,
                        format!(
                            "{} on day {day} has {hits} pin hits, but the frame has {pins} pins.",
                            name()
                        ),
                        "Recount the hits (at most one per pin) and correct the value.",
                    ));
                    return;
                }
                Some(100.0 * hits as f64 / pins as f64)
            }
        };
        let Some(expected) = derived else {
            return self.no_entry(row, out);
        };
        // The entry in words, made only for a flag.
        let entry = || match p.method {
            CoverMethod::Percent => format!("{} %", num(expected)),
            CoverMethod::Class => format!(
                "class {} (midpoint {} %)",
                row.class_code.as_deref().unwrap_or_default(),
                num(expected)
            ),
            CoverMethod::Pins => format!(
                "{} of {} pins ({} %)",
                row.pin_hits.unwrap_or_default(),
                p.pins_per_frame.unwrap_or_default(),
                num(expected)
            ),
        };
        match row.cover_pct {
            Some(c) if (c - expected).abs() <= EPSILON => {}
            Some(c) => out.push(self.flag(
                &METHOD,
                row,
                format!(
                    "{} on day {day} has cover_pct {} %, but its entry, {}, gives {} %.",
                    name(),
                    num(c),
                    entry(),
                    num(expected)
                ),
                "Re-enter the value so that the percent is derived again from the entry.",
            )),
            None => out.push(self.flag(
                &METHOD,
                row,
                format!(
                    "{} on day {day} has the entry {} but no cover_pct.",
                    name(),
                    entry()
                ),
                "Re-enter the value so that the percent is derived again from the entry.",
            )),
        }
    }

    /// A row without an entry must not hold a percent either.
    fn no_entry(&self, row: &CoverRow, out: &mut Vec<Flag>) {
        if let Some(c) = row.cover_pct {
            out.push(self.flag(
                &METHOD,
                row,
                format!(
                    "{} on day {} has cover_pct {} % but no entry to derive it from.",
                    self.name(row),
                    self.day,
                    num(c)
                ),
                "Re-enter the value as the protocol records it.",
            ));
        }
    }

    fn check_taxon(&self, row: &CoverRow, out: &mut Vec<Flag>) {
        let Some(taxon) = row.taxon_id.and_then(|t| self.season.taxa.get(&t)) else {
            return;
        };
        if taxon.role != Role::Plant {
            out.push(self.flag(
                &NOT_PLANT,
                row,
                format!(
                    "The cover survey of day {} has a row for {} ({}), which is a {}, not a plant.",
                    self.day, taxon.code, taxon.scientific_name, taxon.role
                ),
                "Delete the row, or move the value to the plant that was meant.",
            ));
        }
    }

    /// Assessed species rows and ground rows (overall vegetation apart).
    fn parts(&self) -> (Vec<&CoverRow>, Vec<&CoverRow>, Option<&CoverRow>) {
        let species = self.rows.iter().filter(|r| r.taxon_id.is_some()).collect();
        let ground = self
            .rows
            .iter()
            .filter(|r| {
                r.category
                    .as_deref()
                    .is_some_and(|c| c != VEGETATION_CATEGORY)
            })
            .collect();
        let vegetation = self
            .rows
            .iter()
            .find(|r| r.category.as_deref() == Some(VEGETATION_CATEGORY));
        (species, ground, vegetation)
    }

    fn check_totals(&self, out: &mut Vec<Flag>) {
        let p = self.protocol;
        let (species, ground, vegetation) = self.parts();
        let pct = |rows: &[&CoverRow]| rows.iter().filter_map(|r| r.cover_pct).sum::<f64>();
        let tol = p.tolerance_pct;
        let day = self.day;
        let fix_typo = format!(
            "Check each value of the day-{day} survey against the sheet; a misplaced decimal point or a value in the wrong row is the usual cause."
        );
        match (p.method, p.hit_rule, p.layered) {
            (CoverMethod::Pins, Some(HitRule::First), _) => {
                let Some(pins) = p.pins_per_frame else { return };
                let hits = |rows: &[&CoverRow]| rows.iter().filter_map(|r| r.pin_hits).sum::<i64>();
                let (s, g) = (hits(&species), hits(&ground));
                if s + g != pins {
                    out.push(TOTAL.flag(
                        self.cage,
                        day,
                        self.visit.id,
                        format!("First hits of day {day} add up to {} (species {s} + ground {g}), but the frame has {pins} pins and each pin takes exactly one category.", s + g),
                        fix_typo.clone(),
                    ));
                }
            }
            (CoverMethod::Percent, _, layered) => {
                let (label, first, g) = if layered {
                    let Some(veg) = vegetation.and_then(|v| v.cover_pct) else {
                        return;
                    };
                    ("overall vegetation", veg, pct(&ground))
                } else {
                    ("species", pct(&species), pct(&ground))
                };
                let total = first + g;
                if (total - 100.0).abs() > tol + EPSILON {
                    out.push(TOTAL.flag(
                        self.cage,
                        day,
                        self.visit.id,
                        format!(
                            "{} + ground of day {day} add up to {} % ({label} {} + ground {}), outside 100 ± {} %.",
                            capitalise(label),
                            num(total),
                            num(first),
                            num(g),
                            num(tol)
                        ),
                        fix_typo.clone(),
                    ));
                }
            }
            _ => {}
        }
        // Without layers and without an exact total, species + ground still
        // cannot exceed 100 %. For classes the lower limits are what the
        // entries promise at least (midpoints would overstate small covers).
        let no_exact_total = match p.method {
            CoverMethod::Class => true,
            CoverMethod::Pins => p.hit_rule != Some(HitRule::First),
            CoverMethod::Percent => false,
        };
        if !p.layered && no_exact_total {
            let least = |r: &&CoverRow| -> Option<f64> {
                match p.method {
                    CoverMethod::Class => r
                        .class_code
                        .as_deref()
                        .and_then(|c| self.season.cover_classes.get(c))
                        .map(|c| c.lower_pct.unwrap_or(c.midpoint_pct)),
                    _ => r.cover_pct,
                }
            };
            let s: f64 = species.iter().filter_map(least).sum();
            let g: f64 = ground.iter().filter_map(least).sum();
            if s + g > 100.0 + tol + EPSILON {
                let what = if p.method == CoverMethod::Class {
                    "the lower limits of the classes"
                } else {
                    "the covers"
                };
                out.push(OVER_100.flag(
                    self.cage,
                    day,
                    self.visit.id,
                    format!(
                        "In the day-{day} survey {what} add up to {} % (species {} + ground {}), more than 100 + {} % in a protocol without layers.",
                        num(s + g),
                        num(s),
                        num(g),
                        num(tol)
                    ),
                    fix_typo,
                ));
            }
        }
    }

    fn check_vegetation(&self, out: &mut Vec<Flag>) {
        let p = self.protocol;
        if !p.layered {
            return;
        }
        let (species, _, vegetation) = self.parts();
        let Some(veg_row) = vegetation else { return };
        let Some(veg) = veg_row.cover_pct else { return };
        let covers: Vec<(f64, &CoverRow)> = species
            .iter()
            .filter_map(|r| r.cover_pct.map(|c| (c, *r)))
            .collect();
        let Some((largest, largest_row)) =
            covers.iter().copied().max_by(|a, b| a.0.total_cmp(&b.0))
        else {
            return;
        };
        let sum: f64 = covers.iter().map(|(c, _)| c).sum();
        // Pin counts are exact; estimates get the protocol's band.
        let band = if p.method == CoverMethod::Pins {
            0.0
        } else {
            p.tolerance_pct
        };
        let day = self.day;
        let message = if veg + band < largest - EPSILON {
            format!(
                "Overall vegetation of day {day} is {} %, below the largest species, {} at {} %{}.",
                num(veg),
                self.name(largest_row),
                num(largest),
                band_words(band)
            )
        } else if veg > sum + band + EPSILON {
            format!(
                "Overall vegetation of day {day} is {} %, above the sum of the species, {} %{}.",
                num(veg),
                num(sum),
                band_words(band)
            )
        } else {
            return;
        };
        out.push(self.flag(
            &VEGETATION,
            veg_row,
            message,
            "Check overall vegetation and the species values of the survey; overall vegetation lies between the largest species and the sum of the species.",
        ));
    }

    fn check_changes(
        &self,
        last: &mut HashMap<TaxonId, (f64, CoverRecordId, i64)>,
        out: &mut Vec<Flag>,
    ) {
        let limit = self.season.limits.cover_change_points;
        for row in self.rows {
            let (Some(taxon), Some(now)) = (row.taxon_id, row.cover_pct) else {
                continue;
            };
            if let Some(&(before, before_id, before_day)) = last.get(&taxon) {
                let change = now - before;
                if change.abs() > limit + EPSILON {
                    out.push(
                        self.flag(
                            &CHANGE,
                            row,
                            format!(
                                "{} went from {} % on day {before_day} to {} % on day {} ({}{} points; more than {} is unusual).",
                                self.name(row),
                                num(before),
                                num(now),
                                self.day,
                                if change > 0.0 { "+" } else { "" },
                                num(change),
                                num(limit)
                            ),
                            "Check both values against the sheets; if the change is real (mowing, flooding, a typo at the earlier survey), confirm the flag with a note.",
                        )
                        .related_to(before_id),
                    );
                }
            }
            last.insert(taxon, (now, row.id, self.day));
        }
    }
}

fn capitalise(s: &str) -> String {
    let mut c = s.chars();
    c.next()
        .map(|f| f.to_uppercase().chain(c).collect())
        .unwrap_or_default()
}

fn band_words(band: f64) -> String {
    if band > 0.0 {
        format!(" (allowing ± {} points)", num(band))
    } else {
        String::new()
    }
}
