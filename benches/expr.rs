//! Times a compiled Gaussian envelope over 10⁷ calls, the integrator's inner-loop cost.

use std::collections::HashMap;
use std::hint::black_box;
use std::time::Instant;

use fieldbook::notebook::expr::{Dim, Quantity, parse};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut params = HashMap::new();
    params.insert("t0".to_string(), Quantity::new(0.5e-6, Dim::TIME));
    params.insert("sigma".to_string(), Quantity::new(0.1e-6, Dim::TIME));
    let gaussian = parse("exp(-(t - t0)^2 / (2*sigma^2))")?.compile(&params)?;
    let shared = gaussian.clone().into_fn();
    let calls = 10_000_000u32;
    let compiled = |t: f64| gaussian.eval(t);
    let hand_written = |t: f64| {
        let d = t - 0.5e-6;
        (-(d * d) / (2.0 * 0.1e-6 * 0.1e-6)).exp()
    };
    let cases: [(&str, &dyn Fn(f64) -> f64); 3] = [
        ("Compiled::eval", &compiled),
        ("into_fn closure", &*shared),
        ("hand-written Rust", &hand_written),
    ];
    for (label, f) in cases {
        let start = Instant::now();
        let mut sum = 0.0;
        for i in 0..calls {
            // 10⁷ calls spread over [0, 1 µs].
            sum += f(black_box(f64::from(i) * 1e-13));
        }
        let ns = start.elapsed().as_secs_f64() * 1e9 / f64::from(calls);
        println!("{label:>18}: {ns:.1} ns per call (sum {sum:.6e})");
    }
    Ok(())
}
