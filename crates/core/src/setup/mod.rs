//! Before the season: read the experiment definition, create the experiment
//! in a new database, and assign treatments to enclosures.

pub mod definition;
pub mod randomise;

use std::collections::HashMap;

pub use definition::Definition;

use crate::model::*;
use crate::store::{IdMaker, Store, Writer};
use crate::{Error, Result};

/// What `init` created.
#[derive(Debug, Clone)]
pub struct InitSummary {
    /// The randomisation seed used (recorded in the experiment row).
    pub seed: u64,
    /// Enclosures created.
    pub enclosures: usize,
    /// Treatments created.
    pub treatments: usize,
}

/// A seed for when the user gives none: random, then recorded like any other.
pub fn fresh_seed() -> u64 {
    let bytes = uuid::Uuid::now_v7().into_bytes();
    let mut tail = [0u8; 8];
    tail.copy_from_slice(&bytes[8..]);
    u64::from_le_bytes(tail) & (i64::MAX as u64)
}

/// Create the experiment of `def` in an empty database and randomise the
/// treatments (seeded). Refused if the database already holds an experiment.
///
/// The ids of the rows made here come from the definition's text and the
/// seed, not from the clock: every tablet initialised from the same file
/// with the same seed holds the very same setup rows, so the tablets can
/// sync with one another (their setup entries agree, field by field).
pub fn init(store: &mut Store, def: &Definition, seed: u64) -> Result<InitSummary> {
    let ids = setup_ids(def, seed);
    let previous = store.swap_ids(ids);
    let result = init_rows(store, def, seed);
    store.swap_ids(previous);
    result
}

/// The id maker of a setup: seeded from the definition text and the seed;
/// timestamps count up from the day before the experiment starts (so setup
/// rows sort before every field record).
fn setup_ids(def: &Definition, seed: u64) -> IdMaker {
    use sha2::{Digest, Sha256};
    let mut h = Sha256::new();
    h.update(b"fieldcage setup ids\n");
    h.update(def.text_sha256);
    h.update(seed.to_le_bytes());
    let start = def
        .start_date()
        .and_hms_opt(0, 0, 0)
        .unwrap_or_default()
        .and_utc()
        .timestamp_millis()
        - 86_400_000;
    IdMaker::seeded(h.finalize().into(), start.max(0) as u64)
}

fn init_rows(store: &mut Store, def: &Definition, seed: u64) -> Result<InitSummary> {
    let seed_i64 = i64::try_from(seed).map_err(|_| {
        Error::invalid(
            "init",
            "seed",
            seed,
            format!("must be at most {}", i64::MAX),
        )
    })?;
    let sizes: Vec<usize> = def.blocks.iter().map(|b| b.enclosures.len()).collect();
    let layout =
        randomise::rcbd(&sizes, def.treatments.len(), seed).map_err(|m| Error::Definition {
            path: def.path.clone(),
            location: format!("block[{}].enclosures", def.blocks[m.block].code),
            reason: format!(
                "the block has {} enclosures but there are {} treatments; a randomised complete \
             block design needs each block to hold each treatment exactly once",
                m.size, m.treatments
            ),
        })?;
    store.write(|w| {
        let existing: i64 = w.conn().query_row(
            "SELECT count(*) FROM experiment WHERE deleted = 0",
            [],
            |r| r.get(0),
        )?;
        if existing > 0 {
            return Err(Error::State(
                "this database already holds an experiment; use a new database file".to_owned(),
            ));
        }
        let experiment = Experiment {
            id: ExperimentId(w.new_id()),
            code: def.experiment.code.clone(),
            title: def.experiment.title.clone(),
            start_date: def.start_date(),
            end_date: def.end_date(),
            utc_offset: def.experiment.utc_offset.clone(),
            design: Design::Rcbd,
            randomisation_seed: Some(seed_i64),
            notes: def.experiment.notes.clone(),
        };
        w.insert(&experiment)?;
        let eid = experiment.id;

        let mut sites = HashMap::new();
        for s in &def.sites {
            let site = Site {
                id: SiteId(w.new_id()),
                experiment_id: eid,
                code: s.code.clone(),
                name: s.name.clone(),
                latitude: s.latitude,
                longitude: s.longitude,
                notes: s.notes.clone(),
            };
            w.insert(&site)?;
            sites.insert(s.code.as_str(), site.id);
        }

        let mut treatments = Vec::new();
        for t in &def.treatments {
            let treatment = Treatment {
                id: TreatmentId(w.new_id()),
                experiment_id: eid,
                code: t.code.clone(),
                name: t.name.clone(),
                herbivores: t.herbivores,
                predator_mode: t.predator_mode,
                notes: t.notes.clone(),
            };
            w.insert(&treatment)?;
            treatments.push(treatment.id);
        }

        let mut taxa = HashMap::new();
        for t in &def.taxa {
            let taxon = Taxon {
                id: TaxonId(w.new_id()),
                experiment_id: eid,
                code: t.code.clone(),
                scientific_name: t.scientific_name.clone(),
                common_name: t.common_name.clone(),
                role: t.role,
                plant_group: t.plant_group,
                notes: t.notes.clone(),
            };
            w.insert(&taxon)?;
            taxa.insert(t.code.as_str(), taxon.id);
        }

        for (t, tid) in def.treatments.iter().zip(&treatments) {
            for s in &t.stock {
                let id = StockingPlanId(w.new_id());
                w.insert(&StockingPlan {
                    id,
                    treatment_id: *tid,
                    taxon_id: taxa[s.taxon.as_str()],
                    initial_count: s.count,
                    restock_below: s.restock_below,
                    stage: s.stage.clone(),
                    notes: None,
                })?;
            }
        }

        let first_site = sites[def.sites[0].code.as_str()];
        for (b, order) in def.blocks.iter().zip(&layout) {
            let block = Block {
                id: BlockId(w.new_id()),
                site_id: b.site.as_deref().map_or(first_site, |c| sites[c]),
                code: b.code.clone(),
                notes: b.notes.clone(),
            };
            w.insert(&block)?;
            for (label, &treatment) in b.enclosures.iter().zip(order) {
                let over = def.enclosures.get(label);
                let d = &def.enclosure_defaults;
                let enclosure = Enclosure {
                    id: EnclosureId(w.new_id()),
                    block_id: block.id,
                    label: label.clone(),
                    area_m2: over
                        .and_then(|e| e.area_m2)
                        .or(d.area_m2)
                        .unwrap_or_default(),
                    height_m: over.and_then(|e| e.height_m).or(d.height_m),
                    mesh_mm: over.and_then(|e| e.mesh_mm).or(d.mesh_mm),
                    x_m: over.and_then(|e| e.x_m),
                    y_m: over.and_then(|e| e.y_m),
                    notes: over.and_then(|e| e.notes.clone()),
                };
                w.insert(&enclosure)?;
                let id = AssignmentId(w.new_id());
                w.insert(&Assignment {
                    id,
                    enclosure_id: enclosure.id,
                    treatment_id: treatments[treatment],
                    method: AssignmentMethod::Rcbd,
                    seed: Some(seed_i64),
                })?;
            }
        }

        let scales = insert_scales(w, def)?;
        let cover = &def.cover;
        let protocol = CoverProtocol {
            id: CoverProtocolId(w.new_id()),
            experiment_id: eid,
            code: cover.code.clone(),
            method: cover.method,
            scale_id: cover.scale.as_deref().map(|c| scales[c]),
            layered: cover.layered,
            pins_per_frame: cover.pins_per_frame,
            hit_rule: cover.hit_rule,
            tolerance_pct: cover
                .tolerance_pct
                .unwrap_or(crate::checks::DEFAULT_COVER_TOLERANCE_PCT),
            notes: cover.notes.clone(),
        };
        w.insert(&protocol)?;
        for g in &cover.ground {
            let id = GroundCategoryId(w.new_id());
            w.insert(&GroundCategory {
                id,
                protocol_id: protocol.id,
                code: g.code.clone(),
                name: g.name.clone(),
            })?;
        }
        let damage = &def.damage;
        let id = DamageProtocolId(w.new_id());
        w.insert(&DamageProtocol {
            id,
            experiment_id: eid,
            code: damage.code.clone(),
            method: damage.method,
            scale_id: damage.scale.as_deref().map(|c| scales[c]),
            leaves_per_enclosure: damage.leaves_per_enclosure,
            notes: damage.notes.clone(),
        })?;
        for &(kind, day, grace_days) in &def.schedule {
            let id = ScheduleEntryId(w.new_id());
            w.insert(&ScheduleEntry {
                id,
                experiment_id: eid,
                kind,
                day,
                grace_days,
            })?;
        }
        Ok(())
    })?;
    Ok(InitSummary {
        seed,
        enclosures: sizes.iter().sum(),
        treatments: def.treatments.len(),
    })
}

fn insert_scales<'d>(w: &mut Writer<'_>, def: &'d Definition) -> Result<HashMap<&'d str, ScaleId>> {
    let mut ids = HashMap::new();
    for s in &def.scales {
        let scale = Scale {
            id: ScaleId(w.new_id()),
            code: s.code.clone(),
            name: s.name.clone(),
            kind: s.kind,
            source: s.source.clone(),
        };
        w.insert(&scale)?;
        for (i, c) in s.classes.iter().enumerate() {
            let id = ScaleClassId(w.new_id());
            w.insert(&ScaleClass {
                id,
                scale_id: scale.id,
                code: c.code.clone(),
                sort_order: i as i64,
                lower_pct: c.lower,
                upper_pct: c.upper,
                midpoint_pct: c.midpoint,
                ordinal: c.ordinal,
                description: c.description.clone(),
            })?;
        }
        ids.insert(s.code.as_str(), scale.id);
    }
    Ok(ids)
}

/// One enclosure of the layout.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct LayoutCell {
    /// Block code.
    pub block: String,
    /// Enclosure label.
    pub enclosure: String,
    /// Treatment code.
    pub treatment: String,
    /// Treatment name.
    pub treatment_name: String,
}

/// The layout: every enclosure with its block and treatment, by block code
/// then label.
pub fn layout(store: &Store) -> Result<Vec<LayoutCell>> {
    let mut stmt = store.conn().prepare(
        "SELECT b.code, e.label, t.code, t.name \
         FROM enclosure e \
         JOIN block b ON b.id = e.block_id \
         LEFT JOIN assignment a ON a.enclosure_id = e.id AND a.deleted = 0 \
         LEFT JOIN treatment t ON t.id = a.treatment_id \
         WHERE e.deleted = 0 \
         ORDER BY b.code, e.label",
    )?;
    let rows = stmt.query_map([], |r| {
        Ok(LayoutCell {
            block: r.get(0)?,
            enclosure: r.get(1)?,
            treatment: r
                .get::<_, Option<String>>(2)?
                .unwrap_or_else(|| "-".to_owned()),
            treatment_name: r
                .get::<_, Option<String>>(3)?
                .unwrap_or_else(|| "(unassigned)".to_owned()),
        })
    })?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

/// The layout as text: one line per block, `label:treatment` per enclosure,
/// then a key of treatment codes.
pub fn format_layout(cells: &[LayoutCell]) -> String {
    let mut out = String::new();
    let width = cells
        .iter()
        .map(|c| c.enclosure.len() + c.treatment.len() + 1)
        .max()
        .unwrap_or(0);
    let mut current: Option<&str> = None;
    for c in cells {
        if current != Some(c.block.as_str()) {
            if current.is_some() {
                out.push('\n');
            }
            out.push_str(&format!("{:<6}", c.block));
            current = Some(&c.block);
        }
        out.push_str(&format!(
            "  {:<width$}",
            format!("{}:{}", c.enclosure, c.treatment)
        ));
    }
    out = out
        .lines()
        .map(str::trim_end)
        .collect::<Vec<_>>()
        .join("\n");
    out.push_str("\n\ntreatments:\n");
    let mut key: Vec<(&str, &str)> = cells
        .iter()
        .map(|c| (c.treatment.as_str(), c.treatment_name.as_str()))
        .collect();
    key.sort();
    key.dedup();
    for (code, name) in key {
        out.push_str(&format!("  {code:<6} {name}\n"));
    }
    out
}
