//! The results screen: the analysis of the season, read in a snapshot of its
//! own so that saves never wait for it.

use serde::{Deserialize, Serialize};

use fieldcage_core::Result;
use fieldcage_core::store::Store;

use crate::*;

impl Service {
    /// The season's results for the results screen: the chart data, the
    /// treatments, what each part assumes and how the data were handled.
    /// Reads only; the analysis runs on the stored rows as they are now,
    /// through a connection of its own, so that saves made meanwhile do not
    /// wait for it (about a second on a 200-cage season).
    pub fn results(&self, req: ResultsRequest) -> Result<ResultsView> {
        let options = fieldcage_core::analysis::Options {
            missing_as: req.missing_as.unwrap_or_default(),
            ..fieldcage_core::analysis::Options::default()
        };
        let reader = Store::open_reader(&self.path)?;
        let r = reader.read_snapshot(|s| fieldcage_core::analysis::analyse(s, &options))?;
        Ok(ResultsView {
            title: r
                .experiment
                .as_ref()
                .map(|(code, title)| format!("{title} ({code})")),
            charts: fieldcage_core::analysis::charts::charts(&r),
            assumptions: fieldcage_core::analysis::report::assumptions(&r),
            treatments: r.treatments,
            notes: r.notes,
            options: r.options,
        })
    }
}

/// Analyse the season for the results screen.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ResultsRequest {
    /// How animals not found at a census count (`dead`, the default, or
    /// `censored`).
    #[serde(default)]
    pub missing_as: Option<fieldcage_core::analysis::MissingRule>,
}

/// What the results screen shows.
#[derive(Debug, Clone, Serialize)]
pub struct ResultsView {
    /// Experiment title and code, when the database holds one.
    pub title: Option<String>,
    /// Treatments and the roles the contrasts give them.
    pub treatments: Vec<fieldcage_core::analysis::TreatmentRole>,
    /// The chart data.
    pub charts: fieldcage_core::analysis::charts::Charts,
    /// What each part of the results assumes.
    pub assumptions: fieldcage_core::analysis::report::Assumptions,
    /// How the data were handled (visits set aside, impossible counts, …).
    pub notes: Vec<String>,
    /// The analysis options used.
    pub options: fieldcage_core::analysis::Options,
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The results screen's analysis reads through a connection of its own:
    /// it finishes while another request holds the store (as a save or a
    /// sync does), so saves never queue behind it.
    #[test]
    fn results_do_not_wait_for_the_store() {
        let tmp = tempfile::tempdir().expect("temp dir");
        let mut store = Store::open(tmp.path().join("d.db")).expect("store");
        fieldcage_core::demo::build(&mut store).expect("demo");
        let service = Service::new(store);
        let held = service.store();
        let (tx, rx) = std::sync::mpsc::channel();
        std::thread::scope(|s| {
            s.spawn(|| {
                let _ = tx.send(service.results(ResultsRequest::default()));
            });
            // A bounded wait for the answer, not a measure of speed.
            let answer = rx.recv_timeout(std::time::Duration::from_secs(120));
            drop(held);
            let view = answer.expect("results answered while the store was held");
            assert!(!view.expect("results").charts.effect_sizes.is_empty());
        });
    }
}
