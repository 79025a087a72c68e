//! Flags for the residual checks, shared by `fit` and `discover`.

use crate::diagnostics::{self, DEFAULT_MAX_ABSORBANCE_AU, ResidualOptions};

/// Residual tests and saturation masking.
#[derive(Debug, Clone, clap::Args)]
pub struct DiagnosticArgs {
    /// Noise of the absorbance readings, AU (one standard deviation) [default: estimated from each spectrum's residual, which also follows smoothing and growth with absorbance]. Give it only when you know it: an underestimate inflates false alarms (5 % low gives about 11 % flagged at a stated 1 %).
    #[arg(long, value_parser = super::common::parse_positive, value_name = "AU")]
    pub noise_au: Option<f64>,
    /// False-alarm rate of the unexplained-absorbance flag: the share of clean samples (white noise) flagged.
    #[arg(long, default_value_t = diagnostics::DEFAULT_ALARM_RATE, value_parser = parse_rate, value_name = "RATE")]
    pub alarm_rate: f64,
    /// Ceiling in AU: points above it are masked out of the fit (stray light); `none` keeps every point.
    #[arg(long, default_value = "2", value_parser = parse_ceiling, value_name = "AU|none")]
    pub max_absorbance: Ceiling,
    /// Weights of the readings in the fit: `estimated` (each spectrum's noise growth with absorbance, weighted when it grows) or `none` (every reading the same).
    #[arg(long, default_value = "estimated", value_parser = parse_weights, value_name = "none|estimated")]
    pub weights: diagnostics::Weights,
    /// Skip the residual tests (no noise estimate, no unexplained-absorbance flag, no screening).
    #[arg(long)]
    pub no_diagnostics: bool,
}

/// `--max-absorbance` value: a ceiling in AU, or none.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Ceiling(pub Option<f64>);

impl Default for Ceiling {
    fn default() -> Self {
        Ceiling(Some(DEFAULT_MAX_ABSORBANCE_AU))
    }
}

/// Parse an alarm rate: a probability strictly between 0 and 0.5.
pub fn parse_rate(s: &str) -> Result<f64, String> {
    match s.trim().parse::<f64>() {
        Ok(v) if v > 0.0 && v < 0.5 => Ok(v),
        _ => Err(format!(
            "'{s}': expected a probability between 0 and 0.5, e.g. 0.01"
        )),
    }
}

/// Parse `--weights`: `none` or `estimated`.
pub fn parse_weights(s: &str) -> Result<diagnostics::Weights, String> {
    match s.trim().to_ascii_lowercase().as_str() {
        "none" => Ok(diagnostics::Weights::None),
        "estimated" => Ok(diagnostics::Weights::Estimated),
        _ => Err(format!("'{s}': expected none or estimated")),
    }
}

/// Parse `--max-absorbance`: a positive number of AU, or `none`.
pub fn parse_ceiling(s: &str) -> Result<Ceiling, String> {
    if s.trim().eq_ignore_ascii_case("none") {
        return Ok(Ceiling(None));
    }
    super::common::parse_positive(s)
        .map(|v| Ceiling(Some(v)))
        .map_err(|_| format!("'{s}': expected a positive absorbance in AU, or none"))
}

impl DiagnosticArgs {
    /// The engine options these flags ask for (no candidates).
    pub fn options(&self) -> diagnostics::Options {
        diagnostics::Options {
            residual: (!self.no_diagnostics).then_some(ResidualOptions {
                noise_au: self.noise_au,
                alarm_rate: self.alarm_rate,
            }),
            max_absorbance_au: self.max_absorbance.0,
            candidates: None,
            weights: self.weights,
        }
    }
}
