//! JSON in, JSON out: the analysis functions for outside reference tests.
//!
//! `fieldcage-probe` (a binary of the test kit) reads one request on
//! standard input and writes the answer on standard output, so the Python
//! reference tests (tests/python/test_analysis_reference.py) check the real
//! Rust code against scipy, numpy and lifelines. Requests:
//!
//! ```json
//! {"op": "diversity", "communities": [[50, 30, 20], [25, 25, 25, 25]]}
//! {"op": "hill", "communities": [[50, 30, 20]], "orders": [0, 0.5, 1, 2]}
//! {"op": "summary", "samples": [[2, 4, 4, 5, 10]]}
//! {"op": "kaplan_meier", "spells": [{"entry": 0, "exit": 7, "count": 2, "event": true}]}
//! ```
//!
//! Answers: `{"results": [...]}` with one item per community or sample
//! ([`Diversity`](fieldcage_core::analysis::diversity::Diversity), a list of Hill numbers, or a
//! [`Summary`](fieldcage_core::analysis::summary::Summary) or `null`), or `{"steps": [...]}` of
//! [`KmStep`](fieldcage_core::analysis::survival::KmStep). Undefined values are `null`.

use serde::Deserialize;
use serde_json::{Value as Json, json};

use fieldcage_core::analysis::{diversity, summary, survival};
use fieldcage_core::{Error, Result};

/// One request.
#[derive(Debug, Deserialize)]
#[serde(tag = "op", rename_all = "snake_case", deny_unknown_fields)]
enum Request {
    Diversity {
        communities: Vec<Vec<f64>>,
    },
    Hill {
        communities: Vec<Vec<f64>>,
        orders: Vec<f64>,
    },
    Summary {
        samples: Vec<Vec<f64>>,
    },
    KaplanMeier {
        spells: Vec<survival::Spell>,
    },
}

/// Answer one JSON request.
pub fn run(input: &str) -> Result<String> {
    let request: Request = serde_json::from_str(input).map_err(|e| {
        Error::invalid(
            "analysis-probe",
            "request",
            input.chars().take(60).collect::<String>(),
            format!("is not a probe request: {e}"),
        )
    })?;
    let answer: Json = match request {
        Request::Diversity { communities } => json!({
            "results": communities
                .iter()
                .map(|c| diversity::diversity(c))
                .collect::<Result<Vec<_>>>()?,
        }),
        Request::Hill {
            communities,
            orders,
        } => {
            if let Some(q) = orders.iter().find(|q| !(q.is_finite() && **q >= 0.0)) {
                return Err(Error::invalid(
                    "analysis-probe",
                    "orders",
                    q,
                    "must be numbers of at least 0",
                ));
            }
            let results = communities
                .iter()
                .map(|c| {
                    let p = diversity::proportions(c)?;
                    Ok(orders
                        .iter()
                        .map(|q| diversity::hill_number(&p, *q))
                        .collect::<Vec<_>>())
                })
                .collect::<Result<Vec<_>>>()?;
            json!({ "results": results })
        }
        Request::Summary { samples } => json!({
            "results": samples
                .iter()
                .map(|s| summary::summarise(s))
                .collect::<Result<Vec<_>>>()?,
        }),
        Request::KaplanMeier { spells } => json!({
            "steps": survival::kaplan_meier(&spells)?,
        }),
    };
    serde_json::to_string(&answer)
        .map_err(|e| Error::State(format!("analysis-probe: cannot write the answer: {e}")))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn answers_a_diversity_request() {
        let out = run(r#"{"op": "diversity", "communities": [[50, 30, 20], [40]]}"#).unwrap();
        let v: Json = serde_json::from_str(&out).unwrap();
        // docs/methods.md §4 check value (computed): H′ of 50, 30, 20 = 1.029653.
        let h = v["results"][0]["shannon"].as_f64().unwrap();
        assert!((h - 1.029653).abs() < 5e-7);
        // One species: Pielou is NA (docs/methods.md §4), i.e. null.
        assert!(v["results"][1]["pielou"].is_null());
    }

    #[test]
    fn refuses_a_request_it_does_not_know() {
        let err = run(r#"{"op": "median", "values": [1]}"#)
            .unwrap_err()
            .to_string();
        assert!(err.contains("analysis-probe.request"), "{err}");
        let err = run(r#"{"op": "hill", "communities": [[1]], "orders": [-1]}"#)
            .unwrap_err()
            .to_string();
        assert!(err.contains("orders") && err.contains("-1"), "{err}");
    }
}
