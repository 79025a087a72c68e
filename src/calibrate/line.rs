//! The least-squares straight line y = a + b·x used at each wavelength, with
//! the standard errors and tests a calibration reports.

use crate::stats;

/// A straight line y = a + b·x fitted by least squares.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LineFit {
    /// Number of points.
    pub n: usize,
    /// Slope b.
    pub slope: f64,
    /// Intercept a.
    pub intercept: f64,
    /// Residual sum of squares.
    pub sse: f64,
    /// Mean of x.
    pub x_mean: f64,
    /// Σ(x − x̄)².
    pub sxx: f64,
    /// Σ(y − ȳ)².
    pub syy: f64,
}

impl LineFit {
    /// Fit a line through points; needs two or more distinct x.
    pub fn new(points: &[(f64, f64)]) -> Option<Self> {
        let n = points.len();
        if n < 2 {
            return None;
        }
        let nf = n as f64;
        let x_mean = points.iter().map(|p| p.0).sum::<f64>() / nf;
        let y_mean = points.iter().map(|p| p.1).sum::<f64>() / nf;
        let sxx: f64 = points.iter().map(|p| (p.0 - x_mean).powi(2)).sum();
        if sxx.is_nan() || sxx <= 0.0 {
            return None;
        }
        let sxy: f64 = points.iter().map(|p| (p.0 - x_mean) * (p.1 - y_mean)).sum();
        let syy: f64 = points.iter().map(|p| (p.1 - y_mean).powi(2)).sum();
        let slope = sxy / sxx;
        let intercept = y_mean - slope * x_mean;
        let sse = points
            .iter()
            .map(|p| (p.1 - intercept - slope * p.0).powi(2))
            .sum();
        Some(LineFit {
            n,
            slope,
            intercept,
            sse,
            x_mean,
            sxx,
            syy,
        })
    }

    /// Residual degrees of freedom, n − 2.
    pub fn df(&self) -> usize {
        self.n - 2
    }

    /// Residual standard deviation s = √(SSE / (n − 2)); `None` for two points.
    pub fn residual_sd(&self) -> Option<f64> {
        (self.df() > 0).then(|| (self.sse / self.df() as f64).sqrt())
    }

    /// Standard error of the slope, s/√Sxx.
    pub fn slope_std_error(&self) -> Option<f64> {
        self.residual_sd().map(|s| s / self.sxx.sqrt())
    }

    /// Standard error of the intercept, s·√(1/n + x̄²/Sxx).
    pub fn intercept_std_error(&self) -> Option<f64> {
        self.residual_sd()
            .map(|s| s * (1.0 / self.n as f64 + self.x_mean.powi(2) / self.sxx).sqrt())
    }

    /// Coefficient of determination; `None` when y does not vary.
    pub fn r_squared(&self) -> Option<f64> {
        (self.syy > 0.0).then(|| 1.0 - self.sse / self.syy)
    }

    /// The line at x.
    pub fn predict(&self, x: f64) -> f64 {
        self.intercept + self.slope * x
    }

    /// Standard error of (mean of m new readings at x0) − (line at x0):
    /// s·√(1/m + 1/n + (x0 − x̄)²/Sxx).
    pub fn prediction_std_error(&self, x0: f64, m: usize) -> Option<f64> {
        self.residual_sd().map(|s| {
            s * (1.0 / m as f64 + 1.0 / self.n as f64 + (x0 - self.x_mean).powi(2) / self.sxx)
                .sqrt()
        })
    }

    /// Standard error of the intercept as a difference from the mean of
    /// `n_blanks` blanks that were subtracted: the blank mean carries its own
    /// scatter, taken as large as the standards',
    /// s·√(1/n + x̄²/Sxx + 1/n_blanks). Without blanks, the plain standard
    /// error.
    pub fn intercept_std_error_against_blank(&self, n_blanks: usize) -> Option<f64> {
        let blank = if n_blanks > 0 {
            1.0 / n_blanks as f64
        } else {
            0.0
        };
        self.residual_sd()
            .map(|s| s * (1.0 / self.n as f64 + self.x_mean.powi(2) / self.sxx + blank).sqrt())
    }

    /// Two-sided p-value of the t test of intercept = 0 (without blanks).
    pub fn intercept_p_value(&self) -> Option<f64> {
        self.intercept_p_value_against_blank(0)
    }

    /// Two-sided p-value of the t test of intercept = 0, the intercept
    /// being measured from the mean of `n_blanks` subtracted blanks.
    pub fn intercept_p_value_against_blank(&self, n_blanks: usize) -> Option<f64> {
        let se = self.intercept_std_error_against_blank(n_blanks)?;
        Some(if se > 0.0 {
            stats::t_two_sided_p(self.intercept / se, self.df() as f64)
        } else if self.intercept.abs() > 0.0 {
            0.0
        } else {
            1.0
        })
    }
}
