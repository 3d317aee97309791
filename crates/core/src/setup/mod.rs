//! Before the season: read the experiment definition, create the experiment
//! in a new database, and assign treatments to enclosures.

pub mod definition;
pub mod randomise;

use std::collections::HashMap;

pub use definition::Definition;

use crate::model::*;
use crate::store::{Store, Writer};
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
fn fresh_seed() -> u64 {
    let bytes = uuid::Uuid::now_v7().into_bytes();
    let mut tail = [0u8; 8];
    tail.copy_from_slice(&bytes[8..]);
    u64::from_le_bytes(tail) & (i64::MAX as u64)
}

/// Where the randomisation seed of a set-up came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SeedSource {
    /// Given on the command line (or by the caller).
    Given,
    /// The definition's `[experiment] seed`.
    Definition,
    /// Drawn now: the other tablets need it to set up the same layout.
    Drawn,
}

/// The seed to set `def` up with: the one `given`, else the definition's,
/// else a fresh one. A seed given that differs from the definition's is
/// refused, naming both (two tablets would hold two layouts).
pub fn choose_seed(def: &Definition, given: Option<u64>) -> Result<(u64, SeedSource)> {
    match (given, def.experiment.seed) {
        (Some(g), Some(d)) if g != d => Err(Error::invalid(
            "init",
            "seed",
            g,
            format!(
                "the definition {} sets seed = {d} in [experiment]; leave --seed out or give \
                 the same seed",
                def.path.display()
            ),
        )),
        (Some(g), _) => Ok((g, SeedSource::Given)),
        (None, Some(d)) => Ok((d, SeedSource::Definition)),
        (None, None) => Ok((fresh_seed(), SeedSource::Drawn)),
    }
}

/// Create the experiment of `def` in an empty database and randomise the
/// treatments (seeded). Refused if the database already holds an experiment.
///
/// Every row made here has an id derived from the experiment's code, the
/// row's natural key and its place in the definition ([`SetupIds`]), not
/// from the clock: tablets set up from the same definition (even a copy with
/// other comments or line endings) hold the very same setup rows and sync
/// with no conflict. The seed is
/// recorded in the experiment row and in every assignment; change-sets carry
/// it, so a tablet holding another randomisation is refused by name.
pub fn init(store: &mut Store, def: &Definition, seed: u64) -> Result<InitSummary> {
    let mut ids = SetupIds::of(def);
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
            id: ExperimentId(ids.next("experiment", &[])),
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
                id: SiteId(ids.next("site", &[&s.code])),
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
                id: TreatmentId(ids.next("treatment", &[&t.code])),
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
                id: TaxonId(ids.next("taxon", &[&t.code])),
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
                let id = StockingPlanId(ids.next("stocking_plan", &[&t.code, &s.taxon]));
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
                id: BlockId(ids.next("block", &[&b.code])),
                site_id: b.site.as_deref().map_or(first_site, |c| sites[c]),
                code: b.code.clone(),
                notes: b.notes.clone(),
            };
            w.insert(&block)?;
            for (label, &treatment) in b.enclosures.iter().zip(order) {
                let over = def.enclosures.get(label);
                let d = &def.enclosure_defaults;
                let enclosure = Enclosure {
                    id: EnclosureId(ids.next("enclosure", &[label])),
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
                let id = AssignmentId(ids.next("assignment", &[label]));
                w.insert(&Assignment {
                    id,
                    enclosure_id: enclosure.id,
                    treatment_id: treatments[treatment],
                    method: AssignmentMethod::Rcbd,
                    seed: Some(seed_i64),
                })?;
            }
        }

        let scales = insert_scales(w, &mut ids, def)?;
        let cover = &def.cover;
        let protocol = CoverProtocol {
            id: CoverProtocolId(ids.next("cover_protocol", &[&cover.code])),
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
            let id = GroundCategoryId(ids.next("ground_category", &[&cover.code, &g.code]));
            w.insert(&GroundCategory {
                id,
                protocol_id: protocol.id,
                code: g.code.clone(),
                name: g.name.clone(),
            })?;
        }
        let damage = &def.damage;
        let id = DamageProtocolId(ids.next("damage_protocol", &[&damage.code]));
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
            let id =
                ScheduleEntryId(ids.next("schedule_entry", &[kind.as_str(), &day.to_string()]));
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

/// Ids of setup rows, as UUIDv7s. The random bits are the SHA-256 of the
/// experiment's code, the table and the row's natural key; the time is the
/// day before the experiment starts plus the row's place among the rows of
/// its table in the definition, so setup sorts before every field record and
/// listings in id order keep the definition's order (the crew's species
/// order on the sheet). Nothing else of the file enters: comments, blank
/// lines, line endings, the order of keys inside an entry or the seed's
/// place change no id.
#[derive(Debug, Clone)]
pub struct SetupIds {
    experiment: String,
    millis: u64,
    places: HashMap<&'static str, u64>,
}

impl SetupIds {
    /// The ids of `def`'s setup.
    pub fn of(def: &Definition) -> SetupIds {
        let start = def
            .start_date()
            .and_hms_opt(0, 0, 0)
            .unwrap_or_default()
            .and_utc()
            .timestamp_millis()
            - 86_400_000;
        SetupIds {
            experiment: def.experiment.code.clone(),
            millis: start.max(0) as u64,
            places: HashMap::new(),
        }
    }

    /// The id of the next row of `table`, whose natural key is `key`.
    pub fn next(&mut self, table: &'static str, key: &[&str]) -> uuid::Uuid {
        use sha2::{Digest, Sha256};
        let place = self.places.entry(table).or_default();
        *place += 1;
        let mut h = Sha256::new();
        h.update(b"fieldcage setup id\n");
        for part in [self.experiment.as_str(), table].iter().chain(key) {
            h.update(part.len().to_le_bytes());
            h.update(part.as_bytes());
        }
        let digest = h.finalize();
        let mut random = [0u8; 10];
        random.copy_from_slice(&digest[..10]);
        uuid::Builder::from_unix_timestamp_millis(self.millis + *place, &random).into_uuid()
    }
}

fn insert_scales<'d>(
    w: &mut Writer<'_>,
    setup: &mut SetupIds,
    def: &'d Definition,
) -> Result<HashMap<&'d str, ScaleId>> {
    let mut ids = HashMap::new();
    for s in &def.scales {
        let scale = Scale {
            id: ScaleId(setup.next("scale", &[&s.code])),
            code: s.code.clone(),
            name: s.name.clone(),
            kind: s.kind,
            source: s.source.clone(),
        };
        w.insert(&scale)?;
        for (i, c) in s.classes.iter().enumerate() {
            let id = ScaleClassId(setup.next("scale_class", &[&s.code, &c.code]));
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
