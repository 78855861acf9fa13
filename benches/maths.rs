//! Timing of the heavy maths: a 200-point resonance fit and 10⁶ Monte Carlo trials of the
//! three-voltmeter model. Run with `cargo bench --bench maths`; prints medians.

use benchrec::montecarlo::monte_carlo;
use benchrec::networks::{rl, rlc};
use benchrec::uncertainty::{Dist, Input};
use std::hint::black_box;
use std::time::{Duration, Instant};

fn median(mut v: Vec<Duration>) -> Duration {
    v.sort();
    v[v.len() / 2]
}

fn main() {
    // 200-point sweep with a deterministic ±0.3 % ripple as "noise".
    let (f0, q, rt) = (2650.0, 8.7, 72.0);
    let f: Vec<f64> = (0..200)
        .map(|k| f0 * 0.3 * 11f64.powf(k as f64 / 199.0))
        .collect();
    let y: Vec<f64> = f
        .iter()
        .enumerate()
        .map(|(k, &x)| rlc::admittance(x, f0, q, rt) * (1.0 + 0.003 * ((k * 7919) as f64).sin()))
        .collect();
    let u: Vec<f64> = y.iter().map(|v| 0.003 * v).collect();
    let mut times = Vec::new();
    let mut evals = 0;
    for _ in 0..201 {
        let t = Instant::now();
        let fit = rlc::fit_resonance(black_box(&f), black_box(&y), black_box(&u)).expect("fit");
        times.push(t.elapsed());
        evals = fit.evaluations;
        black_box(fit);
    }
    let m = median(times);
    println!(
        "rlc fit, 200 points: median {:.3} ms over 201 runs ({evals} evaluations) [target < 1 ms]",
        m.as_secs_f64() * 1e3
    );

    // Three-voltmeter model with gains, per-reading counts and R (11 inputs).
    let mut inputs = Vec::new();
    for (name, v) in [("Vs", 2.0), ("VR", 1.2), ("VL", 1.05)] {
        inputs.push(Input::type_a(name, v, 2e-4, 4.0));
        inputs.push(Input::type_b(
            format!("counts({name})"),
            0.0,
            1.2e-4,
            Dist::Rectangular,
        ));
        inputs.push(Input::type_b(
            format!("gain({name})"),
            1.0,
            0.003,
            Dist::Rectangular,
        ));
    }
    inputs.push(Input::type_b("R", 220.0, 0.6, Dist::Rectangular));
    inputs.push(Input::type_b("f", 800.0, 0.01, Dist::Normal));
    let model = |x: &[f64]| -> Vec<f64> {
        let v = |k: usize| x[3 * k] * x[3 * k + 2] + x[3 * k + 1];
        rl::three_voltmeter(v(0), v(1), v(2), x[9], x[10]).to_vec()
    };
    let threads = rayon::current_num_threads();
    let mut times = Vec::new();
    for run in 0..5 {
        let t = Instant::now();
        let mc = monte_carlo(&inputs, &[], &model, 0.95, 99 + run, Some(1_000_000));
        times.push(t.elapsed());
        black_box(mc);
    }
    let m = median(times);
    println!(
        "monte carlo, three-voltmeter model, 10^6 trials, 5 outputs: median {:.3} s over 5 runs on {threads} threads [target < 1 s on 2 cores]",
        m.as_secs_f64()
    );
    let t = Instant::now();
    let mc = monte_carlo(&inputs, &[], &model, 0.95, 7, None);
    println!(
        "monte carlo, adaptive (JCGM 101 §7.9.4, 2s ≤ δ): {} trials in {:.3} s",
        mc.first().map(|m| m.trials).unwrap_or(0),
        t.elapsed().as_secs_f64()
    );
}
