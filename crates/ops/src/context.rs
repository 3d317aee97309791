//! What every operation needs to know about the experiment, read from the
//! store before each call.

use std::collections::HashMap;

use chrono::FixedOffset;

use fieldcage_core::model::*;
use fieldcage_core::store::Store;
use fieldcage_core::{Error, Result};

use crate::*;

/// What every operation needs to know about the experiment.
pub(crate) struct Context {
    pub(crate) experiment: Experiment,
    pub(crate) site_name: String,
    pub(crate) offset: FixedOffset,
    pub(crate) cages: Vec<CageInfo>,
    pub(crate) cover: CoverInfo,
    pub(crate) damage: DamageInfo,
}

pub(crate) struct CageInfo {
    pub(crate) id: EnclosureId,
    pub(crate) label: String,
    pub(crate) block: String,
    pub(crate) treatment: Treatment,
}

impl Context {
    pub(crate) fn load(store: &Store) -> Result<Context> {
        let experiment = store
            .list::<Experiment>()?
            .into_iter()
            .next()
            .ok_or_else(|| {
                Error::State("the database holds no experiment yet; run fieldcage init".into())
            })?;
        let offset: FixedOffset = experiment.utc_offset.parse().map_err(|_| {
            Error::invalid(
                "experiment",
                "utc_offset",
                &experiment.utc_offset,
                "is not an offset",
            )
        })?;
        let site_name = store
            .list::<Site>()?
            .into_iter()
            .next()
            .map(|s| s.name)
            .unwrap_or_default();
        let blocks: HashMap<BlockId, String> = store
            .list::<Block>()?
            .into_iter()
            .map(|b| (b.id, b.code))
            .collect();
        let treatments: HashMap<TreatmentId, Treatment> = store
            .list::<Treatment>()?
            .into_iter()
            .map(|t| (t.id, t))
            .collect();
        let assigned: HashMap<EnclosureId, TreatmentId> = store
            .list::<Assignment>()?
            .into_iter()
            .map(|a| (a.enclosure_id, a.treatment_id))
            .collect();
        let cages = store
            .list::<Enclosure>()?
            .into_iter()
            .filter_map(|e| {
                let treatment = treatments.get(assigned.get(&e.id)?)?.clone();
                Some(CageInfo {
                    id: e.id,
                    block: blocks.get(&e.block_id).cloned().unwrap_or_default(),
                    label: e.label,
                    treatment,
                })
            })
            .collect();
        let scales = store.list::<ScaleClass>()?;
        let classes_of = |scale: Option<ScaleId>| -> Vec<ClassLine> {
            let mut v: Vec<ClassLine> = scales
                .iter()
                .filter(|c| Some(c.scale_id) == scale)
                .map(|c| ClassLine {
                    code: c.code.clone(),
                    lower_pct: c.lower_pct,
                    upper_pct: c.upper_pct,
                    midpoint_pct: c.midpoint_pct,
                    description: c.description.clone(),
                    sort_order: c.sort_order,
                })
                .collect();
            v.sort_by_key(|c| c.sort_order);
            v
        };
        let protocol = store
            .list::<CoverProtocol>()?
            .into_iter()
            .next()
            .ok_or_else(|| Error::State("the experiment has no cover protocol".into()))?;
        let ground = store
            .list::<GroundCategory>()?
            .into_iter()
            .filter(|g| g.protocol_id == protocol.id)
            .map(|g| CategoryLine {
                code: g.code,
                name: g.name,
            })
            .collect();
        let cover = CoverInfo {
            method: protocol.method,
            layered: protocol.layered,
            pins_per_frame: protocol.pins_per_frame,
            hit_rule: protocol.hit_rule,
            tolerance_pct: protocol.tolerance_pct,
            classes: classes_of(protocol.scale_id),
            ground,
        };
        let dp = store
            .list::<DamageProtocol>()?
            .into_iter()
            .next()
            .ok_or_else(|| Error::State("the experiment has no damage protocol".into()))?;
        let damage = DamageInfo {
            method: dp.method,
            leaves_per_enclosure: dp.leaves_per_enclosure,
            classes: classes_of(dp.scale_id),
        };
        Ok(Context {
            experiment,
            site_name,
            offset,
            cages,
            cover,
            damage,
        })
    }

    pub(crate) fn cage(&self, id: EnclosureId) -> Result<&CageInfo> {
        self.cages
            .iter()
            .find(|c| c.id == id)
            .ok_or_else(|| not_found("enclosure", id))
    }
}
