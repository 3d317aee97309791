//! Treatment summaries of any response: n, mean, standard deviation,
//! standard error and the t-based 95 % confidence interval of the mean,
//! mean ± t(0.975, n − 1) × SD / √n (Student 1908; common practice). The
//! quantile comes from statrs. The interval assumes the cage values are
//! independent and roughly normal (or n large enough for the mean to be).

use serde::{Deserialize, Serialize};
use statrs::distribution::{ContinuousCDF, StudentsT};

use crate::{Error, Result};

/// Summary of one sample.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Summary {
    /// Number of values.
    pub n: usize,
    /// Arithmetic mean.
    pub mean: f64,
    /// Sample standard deviation (n − 1); `None` for n = 1.
    pub sd: Option<f64>,
    /// Standard error SD / √n.
    pub se: Option<f64>,
    /// Lower end of the t-based 95 % interval.
    pub ci_low: Option<f64>,
    /// Upper end.
    pub ci_high: Option<f64>,
}

/// The `p` quantile of Student's t with `df` degrees of freedom (statrs).
pub fn t_quantile(p: f64, df: f64) -> Result<f64> {
    if !(p > 0.0 && p < 1.0) {
        return Err(Error::invalid(
            "summary",
            "probability",
            p,
            "must be between 0 and 1",
        ));
    }
    let t = StudentsT::new(0.0, 1.0, df)
        .map_err(|e| Error::invalid("summary", "degrees_of_freedom", df, format!("{e}")))?;
    Ok(t.inverse_cdf(p))
}

/// Summarise a sample; `None` for no values. Refuses values that are not
/// finite.
pub fn summarise(values: &[f64]) -> Result<Option<Summary>> {
    if let Some(bad) = values.iter().find(|x| !x.is_finite()) {
        return Err(Error::invalid(
            "summary",
            "value",
            bad,
            "must be a finite number",
        ));
    }
    let n = values.len();
    if n == 0 {
        return Ok(None);
    }
    let mean = values.iter().sum::<f64>() / n as f64;
    if n == 1 {
        return Ok(Some(Summary {
            n,
            mean,
            sd: None,
            se: None,
            ci_low: None,
            ci_high: None,
        }));
    }
    let ss: f64 = values.iter().map(|x| (x - mean) * (x - mean)).sum();
    let sd = (ss / (n - 1) as f64).sqrt();
    let se = sd / (n as f64).sqrt();
    let t = t_quantile(0.975, (n - 1) as f64)?;
    Ok(Some(Summary {
        n,
        mean,
        sd: Some(sd),
        se: Some(se),
        ci_low: Some(mean - t * se),
        ci_high: Some(mean + t * se),
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn t_quantiles_match_the_tables() {
        // Student's t table values, from memory: t(0.975, 1) = 12.706205,
        // t(0.975, 4) = 2.776445, t(0.975, 10) = 2.228139.
        assert!((t_quantile(0.975, 1.0).unwrap() - 12.706205).abs() < 1e-6);
        assert!((t_quantile(0.975, 4.0).unwrap() - 2.776445).abs() < 1e-6);
        assert!((t_quantile(0.975, 10.0).unwrap() - 2.228139).abs() < 1e-6);
        assert!(t_quantile(0.975, 0.0).is_err());
        assert!(t_quantile(1.0, 3.0).is_err());
    }

    #[test]
    fn summary_of_five_values() {
        // Worked by hand (common practice formulas): 2, 4, 4, 5, 10 → mean 5,
        // SD √9 = 3, SE 3/√5, CI 5 ± 2.776445 × 1.341641.
        let s = summarise(&[2.0, 4.0, 4.0, 5.0, 10.0]).unwrap().unwrap();
        assert_eq!(s.n, 5);
        assert!((s.mean - 5.0).abs() < 1e-12);
        assert!((s.sd.unwrap() - 3.0).abs() < 1e-12);
        assert!((s.se.unwrap() - 1.341641).abs() < 1e-6);
        assert!((s.ci_low.unwrap() - (5.0 - 2.776445 * 1.341641)).abs() < 1e-5);
        assert!((s.ci_high.unwrap() - (5.0 + 2.776445 * 1.341641)).abs() < 1e-5);
    }

    #[test]
    fn one_value_has_no_spread_and_none_has_no_summary() {
        let s = summarise(&[3.0]).unwrap().unwrap();
        assert_eq!((s.n, s.mean, s.sd, s.ci_low), (1, 3.0, None, None));
        assert_eq!(summarise(&[]).unwrap(), None);
        let err = summarise(&[1.0, f64::NAN]).unwrap_err().to_string();
        assert!(err.contains("summary.value"), "{err}");
    }
}
