//! The full noise study of the residual checks (DEVELOPERS.md → Simulation
//! study): false alarms at alarm rates 0.001/0.01/0.05, ±1.96 SE coverage,
//! detection of an unknown band by peak, and spikes, for every noise type
//! at 1 and 2 nm steps. Invented blends (`tests/support/noise_sim.rs`).
//!
//!     cargo run --release --example noise-study [SAMPLES]
//!
//! SAMPLES (default 4000) clean blends per cell; 1000 contaminated ones per
//! detection cell. A few minutes on two cores at the default.

#[path = "../tests/support/noise_sim.rs"]
mod noise_sim;

use noise_sim::{Noise, Scenario, Unknown, measure, simulate};
use unblend::diagnostics::{self, FLAG_UNEXPLAINED, ResidualOptions};
use unblend::fit::{FLAG_SPIKE, FitOptions, fit_file_with};

fn checks(alarm_rate: f64) -> diagnostics::Options {
    diagnostics::Options {
        residual: Some(ResidualOptions {
            noise_au: None,
            alarm_rate,
        }),
        ..Default::default()
    }
}

fn rate(s: &Scenario, alarm_rate: f64, flag: &str) -> noise_sim::Measured {
    let sim = simulate(s);
    let report = fit_file_with(
        &sim.file,
        &sim.refs,
        &FitOptions::default(),
        &checks(alarm_rate),
    )
    .expect("the study's inputs are valid");
    measure(&sim, &report, flag)
}

fn main() {
    let n: usize = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(4000);
    let noises = [
        Noise::White,
        Noise::MovingAverage(2),
        Noise::MovingAverage(3),
        Noise::MovingAverage(4),
        Noise::MovingAverage(5),
        Noise::Photometric,
    ];
    let peaks = [(0.002, 0.005), (0.005, 0.01), (0.01, 0.02)];
    println!(
        "| noise | step | flagged at 0.001 | 0.01 | 0.05 | ±1.96 SE coverage | band 0.002–0.005 AU | 0.005–0.01 | 0.01–0.02 |"
    );
    println!("|---|---|---|---|---|---|---|---|---|");
    for step in [1.0, 2.0] {
        for (j, noise) in noises.into_iter().enumerate() {
            let clean = |seed| Scenario {
                noise,
                step_nm: step,
                n_samples: n,
                seed,
                unknown: None,
                spike_au: None,
            };
            let seed = 1000 + 10 * j as u64 + step as u64;
            let a = rate(&clean(seed), 0.001, FLAG_UNEXPLAINED);
            let b = rate(&clean(seed), 0.01, FLAG_UNEXPLAINED);
            let c = rate(&clean(seed), 0.05, FLAG_UNEXPLAINED);
            let power: Vec<String> = peaks
                .iter()
                .map(|p| {
                    let s = Scenario {
                        n_samples: 1000,
                        unknown: Some(Unknown {
                            peak_au: *p,
                            fwhm_nm: (20.0, 60.0),
                        }),
                        ..clean(seed + 5)
                    };
                    format!("{:.3}", rate(&s, 0.01, FLAG_UNEXPLAINED).flagged)
                })
                .collect();
            println!(
                "| {} | {step} nm | {:.4} | {:.4} | {:.4} | {:.3} | {} |",
                noise.label(),
                a.flagged,
                b.flagged,
                c.flagged,
                b.coverage,
                power.join(" | ")
            );
        }
    }
    for spike in [0.1, 0.3, 1.0] {
        let s = Scenario {
            noise: Noise::White,
            step_nm: 1.0,
            n_samples: 1000,
            seed: 77,
            unknown: Some(Unknown {
                peak_au: (0.01, 0.010_000_1),
                fwhm_nm: (20.0, 60.0),
            }),
            spike_au: Some(spike),
        };
        let band = rate(&s, 0.01, FLAG_UNEXPLAINED);
        let found = rate(&s, 0.01, FLAG_SPIKE);
        println!(
            "spike {spike} AU beside a 0.01 AU band (white 2 mAU, 1 nm): band flagged {:.3}, spike found {:.3}, coverage {:.3}",
            band.flagged, found.flagged, band.coverage
        );
    }
}
