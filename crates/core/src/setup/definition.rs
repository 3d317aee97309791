//! The experiment definition file (TOML): what the lead writes before the
//! season. It is read into loose `Raw*` types that mirror the file, then
//! checked as a whole into a [`Definition`] that the rest of the code trusts;
//! every problem names the entry and key it is about.
//!
//! The layout is documented by `demo_data/definition.toml`.

use std::collections::{BTreeSet, HashMap};
use std::path::{Path, PathBuf};

use chrono::NaiveDate;
use serde::Deserialize;

use crate::model::{
    CoverMethod, DamageMethod, HitRule, PlantGroup, PredatorMode, Role, ScaleKind, VisitKind,
};
use crate::{Error, Result};

/// A checked experiment definition.
#[derive(Debug, Clone)]
pub struct Definition {
    /// Where it was read from (for messages).
    pub path: PathBuf,
    /// `[experiment]`.
    pub experiment: RawExperiment,
    /// `[[site]]`.
    pub sites: Vec<RawSite>,
    /// `[[block]]`, in file order.
    pub blocks: Vec<RawBlock>,
    /// Defaults for every enclosure.
    pub enclosure_defaults: RawEnclosureDefaults,
    /// Per-enclosure overrides by label.
    pub enclosures: HashMap<String, RawEnclosure>,
    /// `[[treatment]]`, in file order.
    pub treatments: Vec<RawTreatment>,
    /// `[[taxon]]`.
    pub taxa: Vec<RawTaxon>,
    /// Built-in scales followed by the file's own `[[scale]]` entries.
    pub scales: Vec<RawScale>,
    /// `[cover]`.
    pub cover: RawCover,
    /// `[damage]`.
    pub damage: RawDamage,
    /// Planned visits: (kind, day, grace days), sorted.
    pub schedule: Vec<(VisitKind, i64, i64)>,
}

/// `[experiment]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawExperiment {
    /// Short code.
    pub code: String,
    /// Title.
    pub title: String,
    /// Day 0.
    pub start_date: toml::value::Datetime,
    /// Planned last day.
    pub end_date: Option<toml::value::Datetime>,
    /// Offset of local time from UTC, e.g. "+02:00".
    pub utc_offset: String,
    /// Randomisation seed: every tablet set up from this file gets the same
    /// layout without `--seed` (`fieldcage init` prints the seed it drew
    /// for a file without one).
    pub seed: Option<u64>,
    /// Notes.
    pub notes: Option<String>,
}

/// `[[site]]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSite {
    /// Short code.
    pub code: String,
    /// Name.
    pub name: String,
    /// Decimal degrees.
    pub latitude: Option<f64>,
    /// Decimal degrees.
    pub longitude: Option<f64>,
    /// Notes.
    pub notes: Option<String>,
}

/// `[[block]]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawBlock {
    /// Short code.
    pub code: String,
    /// Site code (may be left out when there is one site).
    pub site: Option<String>,
    /// Labels of the enclosures in the block, in field order.
    pub enclosures: Vec<String>,
    /// Notes.
    pub notes: Option<String>,
}

/// `[enclosure_defaults]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawEnclosureDefaults {
    /// Ground area, m².
    pub area_m2: Option<f64>,
    /// Height, m.
    pub height_m: Option<f64>,
    /// Mesh opening, mm.
    pub mesh_mm: Option<f64>,
}

/// `[[enclosure]]`: overrides for one enclosure.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawEnclosure {
    /// Label (must appear in a block).
    pub label: String,
    /// Ground area, m².
    pub area_m2: Option<f64>,
    /// Height, m.
    pub height_m: Option<f64>,
    /// Mesh opening, mm.
    pub mesh_mm: Option<f64>,
    /// Position east of the site origin, m.
    pub x_m: Option<f64>,
    /// Position north of the site origin, m.
    pub y_m: Option<f64>,
    /// Notes.
    pub notes: Option<String>,
}

/// `[[treatment]]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawTreatment {
    /// Short code.
    pub code: String,
    /// Name.
    pub name: String,
    /// Herbivores stocked?
    pub herbivores: bool,
    /// none / lethal / risk.
    pub predator_mode: PredatorMode,
    /// Animals stocked per enclosure.
    #[serde(default)]
    pub stock: Vec<RawStock>,
    /// Notes.
    pub notes: Option<String>,
}

/// One `stock` entry of a treatment.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawStock {
    /// Taxon code.
    pub taxon: String,
    /// Animals per enclosure on day 0.
    pub count: i64,
    /// Restock when fewer are found alive.
    pub restock_below: Option<i64>,
    /// Life stage.
    pub stage: Option<String>,
}

/// `[[taxon]]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawTaxon {
    /// Short code.
    pub code: String,
    /// Scientific name.
    pub scientific_name: String,
    /// Common name.
    pub common_name: Option<String>,
    /// plant / herbivore / predator.
    pub role: Role,
    /// Plant functional group (plants only).
    pub plant_group: Option<PlantGroup>,
    /// Notes.
    pub notes: Option<String>,
}

/// `[[scale]]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawScale {
    /// Short code.
    pub code: String,
    /// Name.
    pub name: String,
    /// cover / damage.
    pub kind: ScaleKind,
    /// Published source.
    pub source: Option<String>,
    /// Classes from low to high.
    pub classes: Vec<RawClass>,
}

/// One class of a `[[scale]]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawClass {
    /// Code written in the field.
    pub code: String,
    /// Lower limit, %.
    pub lower: Option<f64>,
    /// Upper limit, %.
    pub upper: Option<f64>,
    /// Value used for conversion, %.
    pub midpoint: f64,
    /// Ordinal value for indices.
    pub ordinal: Option<i64>,
    /// Meaning.
    pub description: Option<String>,
}

/// `[cover]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawCover {
    /// Short code.
    pub code: String,
    /// percent / class / pins.
    pub method: CoverMethod,
    /// Scale code (class).
    pub scale: Option<String>,
    /// Layers overlap?
    #[serde(default)]
    pub layered: bool,
    /// Pins per frame (pins).
    pub pins_per_frame: Option<i64>,
    /// first / any (pins).
    pub hit_rule: Option<HitRule>,
    /// Band around 100 for visual totals, percentage points (default 5).
    pub tolerance_pct: Option<f64>,
    /// Ground categories.
    #[serde(default)]
    pub ground: Vec<RawGround>,
    /// Notes.
    pub notes: Option<String>,
}

/// One ground category.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawGround {
    /// Short code.
    pub code: String,
    /// Name.
    pub name: String,
}

/// `[damage]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawDamage {
    /// Short code.
    pub code: String,
    /// class / percent.
    pub method: DamageMethod,
    /// Scale code (class).
    pub scale: Option<String>,
    /// Tagged leaves per enclosure.
    pub leaves_per_enclosure: i64,
    /// Notes.
    pub notes: Option<String>,
}

/// Days of one visit kind: a list, or a regular series.
#[derive(Debug, Clone, Deserialize)]
#[serde(untagged)]
pub enum RawDays {
    /// Explicit days.
    List(Vec<i64>),
    /// Every `every` days from `from` to `to` inclusive.
    Series {
        /// Interval in days.
        every: i64,
        /// First day.
        from: i64,
        /// Last day (inclusive).
        to: i64,
    },
}

/// `[schedule]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSchedule {
    /// Days late that still count as on time (default 0).
    #[serde(default)]
    pub grace_days: i64,
    /// Stocking days.
    pub stocking: Option<RawDays>,
    /// Census days.
    pub census: Option<RawDays>,
    /// Cover days.
    pub cover: Option<RawDays>,
    /// Damage days.
    pub damage: Option<RawDays>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawFile {
    experiment: RawExperiment,
    site: Vec<RawSite>,
    block: Vec<RawBlock>,
    #[serde(default)]
    enclosure_defaults: RawEnclosureDefaults,
    #[serde(default)]
    enclosure: Vec<RawEnclosure>,
    treatment: Vec<RawTreatment>,
    taxon: Vec<RawTaxon>,
    #[serde(default)]
    scale: Vec<RawScale>,
    cover: RawCover,
    damage: RawDamage,
    schedule: RawSchedule,
}

#[derive(Deserialize)]
struct ScaleFile {
    scale: Vec<RawScale>,
}

/// The scales shipped with fieldcage.
pub fn builtin_scales() -> Vec<RawScale> {
    let file: ScaleFile = toml::from_str(include_str!("builtin_scales.toml"))
        .unwrap_or_else(|e| panic!("builtin_scales.toml: {e}"));
    file.scale
}

/// Read and check a definition file.
pub fn read(path: &Path) -> Result<Definition> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
    parse(path, &text)
}

/// Check a definition given as text (`path` is used in messages).
pub fn parse(path: &Path, text: &str) -> Result<Definition> {
    let err = |location: &str, reason: String| Error::Definition {
        path: path.to_path_buf(),
        location: location.to_owned(),
        reason,
    };
    let raw: RawFile = toml::from_str(text).map_err(|e| {
        let location = e
            .span()
            .map(|s| {
                let line = text[..s.start.min(text.len())].matches('\n').count() + 1;
                format!("line {line}")
            })
            .unwrap_or_else(|| "file".to_owned());
        err(&location, e.message().to_owned())
    })?;

    let start = toml_date(&raw.experiment.start_date).ok_or_else(|| {
        err(
            "experiment.start_date",
            format!("{} is not a date YYYY-MM-DD", raw.experiment.start_date),
        )
    })?;
    if let Some(end) = &raw.experiment.end_date {
        let end_date = toml_date(end).ok_or_else(|| {
            err(
                "experiment.end_date",
                format!("{end} is not a date YYYY-MM-DD"),
            )
        })?;
        if end_date < start {
            return Err(err(
                "experiment.end_date",
                format!("{end_date} is before start_date {start}"),
            ));
        }
    }

    unique_codes(raw.site.iter().map(|s| s.code.as_str()), "site").map_err(|(l, r)| err(&l, r))?;
    unique_codes(raw.block.iter().map(|b| b.code.as_str()), "block")
        .map_err(|(l, r)| err(&l, r))?;
    unique_codes(raw.treatment.iter().map(|t| t.code.as_str()), "treatment")
        .map_err(|(l, r)| err(&l, r))?;
    unique_codes(raw.taxon.iter().map(|t| t.code.as_str()), "taxon")
        .map_err(|(l, r)| err(&l, r))?;
    unique_codes(
        raw.block
            .iter()
            .flat_map(|b| b.enclosures.iter().map(String::as_str)),
        "enclosure",
    )
    .map_err(|(l, r)| err(&l, r))?;
    if raw.site.is_empty() {
        return Err(err("site", "at least one [[site]] is needed".to_owned()));
    }
    if raw.treatment.is_empty() {
        return Err(err(
            "treatment",
            "at least one [[treatment]] is needed".to_owned(),
        ));
    }
    let site_codes: BTreeSet<&str> = raw.site.iter().map(|s| s.code.as_str()).collect();
    for b in &raw.block {
        match &b.site {
            Some(site) if !site_codes.contains(site.as_str()) => {
                return Err(err(
                    &format!("block[{}].site", b.code),
                    format!("unknown site code {site:?}"),
                ));
            }
            None if raw.site.len() > 1 => {
                return Err(err(
                    &format!("block[{}].site", b.code),
                    "name the site: the definition has more than one".to_owned(),
                ));
            }
            _ => {}
        }
        if b.enclosures.is_empty() {
            return Err(err(
                &format!("block[{}].enclosures", b.code),
                "a block needs enclosures".to_owned(),
            ));
        }
    }
    let labels: BTreeSet<&str> = raw
        .block
        .iter()
        .flat_map(|b| b.enclosures.iter().map(String::as_str))
        .collect();
    let mut enclosures = HashMap::new();
    for e in raw.enclosure {
        if !labels.contains(e.label.as_str()) {
            return Err(err(
                &format!("enclosure[{}]", e.label),
                "is not listed in any block".to_owned(),
            ));
        }
        if enclosures.contains_key(&e.label) {
            return Err(err(
                &format!("enclosure[{}]", e.label),
                "is given twice".to_owned(),
            ));
        }
        enclosures.insert(e.label.clone(), e);
    }
    let area_missing = raw.enclosure_defaults.area_m2.is_none();
    if let Some(label) = labels
        .iter()
        .find(|l| area_missing && enclosures.get(**l).and_then(|e| e.area_m2).is_none())
    {
        return Err(err(
            &format!("enclosure[{label}].area_m2"),
            "no area: set enclosure_defaults.area_m2 or the enclosure's own".to_owned(),
        ));
    }

    let taxa: HashMap<&str, &RawTaxon> = raw.taxon.iter().map(|t| (t.code.as_str(), t)).collect();
    for t in &raw.taxon {
        match (t.role, t.plant_group) {
            (Role::Plant, None) => {
                return Err(err(
                    &format!("taxon[{}].plant_group", t.code),
                    "a plant needs a plant_group".to_owned(),
                ));
            }
            (Role::Herbivore | Role::Predator, Some(g)) => {
                return Err(err(
                    &format!("taxon[{}].plant_group", t.code),
                    format!("{g} is for plants; this taxon is a {}", t.role),
                ));
            }
            _ => {}
        }
    }
    for t in &raw.treatment {
        let mut seen = BTreeSet::new();
        for (i, s) in t.stock.iter().enumerate() {
            let loc = format!("treatment[{}].stock[{i}]", t.code);
            let taxon = taxa.get(s.taxon.as_str()).ok_or_else(|| {
                err(
                    &format!("{loc}.taxon"),
                    format!("unknown taxon code {:?}", s.taxon),
                )
            })?;
            if !seen.insert(s.taxon.as_str()) {
                return Err(err(
                    &format!("{loc}.taxon"),
                    format!("{} is stocked twice", s.taxon),
                ));
            }
            match taxon.role {
                Role::Plant => {
                    return Err(err(
                        &format!("{loc}.taxon"),
                        format!("{} is a plant; only animals are stocked", s.taxon),
                    ));
                }
                Role::Herbivore if !t.herbivores => {
                    return Err(err(
                        &format!("{loc}.taxon"),
                        format!(
                            "{} is a herbivore but the treatment has herbivores = false",
                            s.taxon
                        ),
                    ));
                }
                Role::Predator if t.predator_mode == PredatorMode::None => {
                    return Err(err(
                        &format!("{loc}.taxon"),
                        format!(
                            "{} is a predator but the treatment has predator_mode = \"none\"",
                            s.taxon
                        ),
                    ));
                }
                _ => {}
            }
            if s.count < 0 {
                return Err(err(
                    &format!("{loc}.count"),
                    format!("{} is negative", s.count),
                ));
            }
            if let Some(r) = s.restock_below
                && !(0..=s.count).contains(&r)
            {
                return Err(err(
                    &format!("{loc}.restock_below"),
                    format!("{r} must be between 0 and the stocked count {}", s.count),
                ));
            }
        }
    }

    let mut scales = builtin_scales();
    for s in raw.scale {
        if scales.iter().any(|b| b.code == s.code) {
            return Err(err(
                &format!("scale[{}]", s.code),
                "a scale with this code is built in; choose another code".to_owned(),
            ));
        }
        scales.push(s);
    }
    for s in &scales {
        check_scale(s).map_err(|(l, r)| err(&l, r))?;
    }
    let find_scale = |code: &Option<String>, kind: ScaleKind, loc: &str| -> Result<()> {
        let Some(code) = code else {
            return Err(err(loc, "the class method needs a scale".to_owned()));
        };
        match scales.iter().find(|s| &s.code == code) {
            None => Err(err(loc, format!("unknown scale {code:?}"))),
            Some(s) if s.kind != kind => Err(err(
                loc,
                format!("scale {code:?} is a {} scale, not {kind}", s.kind),
            )),
            Some(_) => Ok(()),
        }
    };
    let cover = raw.cover;
    match cover.method {
        CoverMethod::Class => find_scale(&cover.scale, ScaleKind::Cover, "cover.scale")?,
        CoverMethod::Pins => {
            if !matches!(cover.pins_per_frame, Some(n) if n >= 1) {
                return Err(err(
                    "cover.pins_per_frame",
                    "the pins method needs pins_per_frame of at least 1".to_owned(),
                ));
            }
            if cover.hit_rule.is_none() {
                return Err(err(
                    "cover.hit_rule",
                    "the pins method needs hit_rule = \"first\" or \"any\"".to_owned(),
                ));
            }
        }
        CoverMethod::Percent => {}
    }
    if cover.method != CoverMethod::Class && cover.scale.is_some() {
        return Err(err(
            "cover.scale",
            format!(
                "a scale is only used by the class method, not {}",
                cover.method
            ),
        ));
    }
    if let Some(t) = cover.tolerance_pct
        && !(0.0..=100.0).contains(&t)
    {
        return Err(err(
            "cover.tolerance_pct",
            format!("{t} must be between 0 and 100"),
        ));
    }
    unique_codes(cover.ground.iter().map(|g| g.code.as_str()), "cover.ground")
        .map_err(|(l, r)| err(&l, r))?;
    if cover
        .ground
        .iter()
        .any(|g| g.code == crate::model::VEGETATION_CATEGORY)
    {
        return Err(err(
            "cover.ground",
            "\"vegetation\" is reserved for overall vegetation cover".to_owned(),
        ));
    }
    let damage = raw.damage;
    match damage.method {
        DamageMethod::Class => find_scale(&damage.scale, ScaleKind::Damage, "damage.scale")?,
        DamageMethod::Percent if damage.scale.is_some() => {
            return Err(err(
                "damage.scale",
                "a scale is only used by the class method".to_owned(),
            ));
        }
        DamageMethod::Percent => {}
    }
    if damage.leaves_per_enclosure < 1 {
        return Err(err(
            "damage.leaves_per_enclosure",
            format!("{} must be at least 1", damage.leaves_per_enclosure),
        ));
    }

    let sched = raw.schedule;
    if sched.grace_days < 0 {
        return Err(err(
            "schedule.grace_days",
            format!("{} is negative", sched.grace_days),
        ));
    }
    let mut schedule = Vec::new();
    for (kind, days) in [
        (VisitKind::Stocking, &sched.stocking),
        (VisitKind::Census, &sched.census),
        (VisitKind::Cover, &sched.cover),
        (VisitKind::Damage, &sched.damage),
    ] {
        let loc = format!("schedule.{kind}");
        let days = match days {
            None => continue,
            Some(RawDays::List(d)) => d.clone(),
            Some(RawDays::Series { every, from, to }) => {
                if *every < 1 || from > to {
                    return Err(err(
                        &loc,
                        format!("every = {every}, from = {from}, to = {to} gives no days"),
                    ));
                }
                (*from..=*to).step_by(*every as usize).collect()
            }
        };
        let mut seen = BTreeSet::new();
        for d in days {
            if d < 0 {
                return Err(err(&loc, format!("day {d} is before the start")));
            }
            if !seen.insert(d) {
                return Err(err(&loc, format!("day {d} is listed twice")));
            }
            schedule.push((kind, d, sched.grace_days));
        }
    }
    schedule.sort();

    Ok(Definition {
        path: path.to_path_buf(),
        experiment: raw.experiment,
        sites: raw.site,
        blocks: raw.block,
        enclosure_defaults: raw.enclosure_defaults,
        enclosures,
        treatments: raw.treatment,
        taxa: raw.taxon,
        scales,
        cover,
        damage,
        schedule,
    })
}

impl Definition {
    /// Day 0 of the experiment.
    pub fn start_date(&self) -> NaiveDate {
        toml_date(&self.experiment.start_date).unwrap_or_default()
    }

    /// Planned last day, if given.
    pub fn end_date(&self) -> Option<NaiveDate> {
        self.experiment.end_date.as_ref().and_then(toml_date)
    }
}

fn toml_date(d: &toml::value::Datetime) -> Option<NaiveDate> {
    match (d.date, d.time, d.offset) {
        (Some(date), None, None) => {
            NaiveDate::from_ymd_opt(date.year.into(), date.month.into(), date.day.into())
        }
        _ => None,
    }
}

fn unique_codes<'a>(
    codes: impl Iterator<Item = &'a str>,
    what: &str,
) -> Result<(), (String, String)> {
    let mut seen = BTreeSet::new();
    for c in codes {
        if !seen.insert(c) {
            return Err((
                format!("{what}[{c}]"),
                format!("the code {c:?} is used twice"),
            ));
        }
    }
    Ok(())
}

fn check_scale(s: &RawScale) -> Result<(), (String, String)> {
    let loc = format!("scale[{}]", s.code);
    if s.classes.is_empty() {
        return Err((loc, "a scale needs classes".to_owned()));
    }
    unique_codes(
        s.classes.iter().map(|c| c.code.as_str()),
        &format!("{loc}.classes"),
    )?;
    for c in &s.classes {
        let cl = format!("{loc}.classes[{}]", c.code);
        let in_range = |x: f64| (0.0..=100.0).contains(&x);
        if !in_range(c.midpoint) {
            return Err((
                format!("{cl}.midpoint"),
                format!("{} must be between 0 and 100", c.midpoint),
            ));
        }
        if let (Some(lo), Some(hi)) = (c.lower, c.upper) {
            if !in_range(lo) || !in_range(hi) || lo > hi {
                return Err((
                    cl,
                    format!("range {lo}-{hi} is not within 0-100 from low to high"),
                ));
            }
            if c.midpoint < lo || c.midpoint > hi {
                return Err((
                    format!("{cl}.midpoint"),
                    format!("{} lies outside the class range {lo}-{hi}", c.midpoint),
                ));
            }
        }
    }
    Ok(())
}
