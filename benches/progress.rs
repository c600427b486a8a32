//! Criterion benchmarks of the global progress-curve fit: one group of 96 wells x 60 reads, plain
//! Michaelis-Menten (closed form), with and without the Km profile interval, and the ODE models
//! (product inhibition, inactivation). Run with `cargo bench --bench progress`.

use std::hint::black_box;

use criterion::{criterion_group, criterion_main, Criterion};

use platekin::progress::global_fit::synthetic::{simulate_group, SyntheticGroup};
use platekin::progress::global_fit::{fit_group, GlobalFitOptions, ProgressModel, WellCurve};
use platekin::progress::ode::CurveConstants;

/// 96 wells: 12 substrate levels from 2 to 4096 uM (doubling), 8 replicates, 60 reads 30 s apart.
fn group() -> Vec<WellCurve> {
    let s0_um: Vec<f64> = (0..96).map(|i| 2.0 * 2f64.powi(i % 12)).collect();
    let spec = SyntheticGroup {
        constants: CurveConstants {
            kcat: 12.0,
            km: 60.0,
            inverse_kp: 0.0,
            k_inact: 0.0,
        },
        s0_um,
        e0_um: 0.005,
        times_s: (0..60).map(|i| 30.0 * f64::from(i)).collect(),
        dead_time_s: 0.0,
        signal_per_substrate: -0.0099,
        noise_sd: 0.002,
        seed: 11,
    };
    simulate_group(&spec).expect("the benchmark group simulates")
}

fn benchmarks(criterion: &mut Criterion) {
    let wells = group();
    let plain = GlobalFitOptions {
        profile_km: false,
        ..GlobalFitOptions::default()
    };
    criterion.bench_function("progress_fit_96x60_closed_form", |b| {
        b.iter(|| fit_group(black_box(&wells), &plain).expect("fits"))
    });
    criterion.bench_function("progress_fit_96x60_closed_form_with_km_profile", |b| {
        b.iter(|| fit_group(black_box(&wells), &GlobalFitOptions::default()).expect("fits"))
    });
    let mut slow = criterion.benchmark_group("ode");
    slow.sample_size(10);
    for model in [ProgressModel::ProductInhibition, ProgressModel::Inactivation] {
        let options = GlobalFitOptions {
            model,
            profile_km: false,
            ..GlobalFitOptions::default()
        };
        slow.bench_function(format!("progress_fit_96x60_{}", model.name()), |b| {
            b.iter(|| fit_group(black_box(&wells), &options).expect("fits"))
        });
    }
    slow.finish();
}

criterion_group!(progress_benches, benchmarks);
criterion_main!(progress_benches);
