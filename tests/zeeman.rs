//! Real atoms through run-files, end to end: species and quantum-number lines expanded into
//! Zeeman sublevels, groups in `start` and `observe`, polarisation by angle and by helicity about
//! the beam, saturation parameters, intensities against the published saturation intensity, and
//! the Doppler shift of a moving atom. Each run-file carries its checks against published
//! formulas; a test passes when `fieldbook run` exits 0 with every check held.

mod common;
use common::*;

/// Writes `body` as `NAME.md` in a scratch folder, runs it without a cache and returns the exit
/// code and everything printed.
fn run(name: &str, body: &str) -> (Option<i32>, String) {
    let dir = temp_dir(name);
    let f = dir.join(format!("{name}.md"));
    std::fs::write(&f, body).unwrap();
    let o = bin().arg("run").arg(&f).arg("--no-cache").output().unwrap();
    (o.status.code(), text(&o))
}

/// Asserts that `body` runs with `checks` checks, all held.
fn holds(name: &str, body: &str, checks: usize) {
    let (code, t) = run(name, body);
    assert_eq!(code, Some(0), "{t}");
    assert!(t.contains(&format!("all {checks} check(s) held")), "{t}");
}

/// The first error `fieldbook check` reports for `body`, which must be refused with exit 2.
fn refused(name: &str, body: &str) -> String {
    let dir = temp_dir(name);
    let f = dir.join(format!("{name}.md"));
    std::fs::write(&f, body).unwrap();
    let o = bin().arg("check").arg(&f).output().unwrap();
    let t = text(&o);
    assert_eq!(o.status.code(), Some(2), "{t}");
    t
}

/// ⁸⁷Rb D2 in a 0.1 G field, as the species table gives it and as quantum numbers with the same
/// constants: σ⁺ light on the hyperfine pair F = 2 → F' = 3, swept across the line, pumps into
/// the stretched state and peaks where the cycling line |2, 2⟩ → |3', 3'⟩ sits, at
/// (3 g_F' − 2 g_F) μ_B B/ħ from the zero-field line, with the weak-field
/// g_F = g_J [F(F+1) − I(I+1) + J(J+1)]/2F(F+1) + g_I [F(F+1) + I(I+1) − J(J+1)]/2F(F+1)
/// (Steck, *Rubidium 87 D Line Data*, rev. 2.2, 2021, eq. 23; from memory). The peak height is
/// the two-level (s/2)/(1 + s) with s = I/I_sat, I_sat = 1.669 mW/cm² for σ⁺ on the cycling
/// line (same notes, table 7), to the 4 digits of that value.
#[test]
fn species_and_quantum_numbers_give_the_same_cycling_line() {
    let light_and_checks = r#"
```light pump
drives       = "g2 -> e3"
detuning     = "delta"
intensity    = "1.669 mW/cm^2"
polarization = "sigma+"
```

```evolve line
steady  = true
observe = ["population(e3_m3)", "population(g2_m2)", "population(g2, e3_m3)"]
sweep.delta = { from = "-2π × 1 MHz", to = "2π × 1 MHz", points = 41 }
```

```params lande
g_J  = 2.00233113
g_Jp = 1.3362
g_I  = -0.0009951414
g_F  = "g_J × (6 - 15/4 + 3/4) / 12 + g_I × (6 + 15/4 - 3/4) / 12"
g_Fp = "g_Jp × (12 - 15/4 + 15/4) / 24 + g_I × (12 + 15/4 - 15/4) / 24"
peak = "(3 g_Fp - 2 g_F) × μ_B × 0.1 G / ħ"
```

```check
"argmax(line.final.population(e3_m3))"    = { near = "peak", rel = 1e-3 }
"max(line.final.population(e3_m3))"       = { near = 0.25, within = 2e-4 }
"line.final.population(g2, e3_m3) at delta = 0 Hz" = { near = 1, within = 1e-9 }
```
"#;
    let params = "```params\ndelta = \"0 Hz\"\n```\n\n";
    let species = format!(
        "{params}```atom rb\nspecies = \"87Rb\"\nline = \"D2\"\nmagnetic_field = \"0.1 G\"\nkeep = [\"g2\", \"e3\"]\n```\n{light_and_checks}"
    );
    holds("species-line", &species, 3);
    // The weak-field model puts the line at exactly that shift (stretched states do not mix, so
    // the full model agrees at any field).
    holds(
        "linear-line",
        &species.replace("keep = [", "zeeman = \"linear\"\nkeep = ["),
        3,
    );
    // The same constants as quantum numbers (the species table's ⁸⁷Rb entry).
    let numbers = format!(
        r#"{params}```atom rb
lower          = {{ J = "1/2", I = "3/2", A = "2π × 3417.34130545215 MHz", g_J = 2.00233113, g_I = -0.0009951414 }}
upper          = {{ J = "3/2", I = "3/2", A = "2π × 84.7185 MHz", B = "2π × 12.4965 MHz", g_J = 1.3362, g_I = -0.0009951414 }}
wavelength     = "780.241209686 nm"
lifetime       = "26.2348 ns"
magnetic_field = "0.1 G"
keep           = ["g2", "e3"]
```
{light_and_checks}"#
    );
    holds("numbers-line", &numbers, 3);
}

/// A saturation parameter s on a closed two-level line gives ρ_ee = (s/2)/(1 + s) on resonance
/// (Foot, *Atomic Physics*, OUP 2005, ch. 7).
#[test]
fn saturation_parameter_on_a_hand_made_line() {
    holds(
        "saturation",
        r#"
```params
s = 1
```

```atom two
[levels]
g = "0 Hz"
e = "2π × 400 THz"

[decay]
"e -> g" = "2π × 5 MHz"
```

```light probe
drives     = "g -> e"
saturation = "s"
```

```evolve line
steady  = true
observe = ["population(e)"]
sweep.s = { values = ["0.1", "1", "10"] }
```

```check
"line.final.population(e) at s = 0.1" = { near = "0.05 / 1.1", within = 1e-12 }
"line.final.population(e) at s = 10"  = { near = "5 / 11", within = 1e-12 }
```
"#,
        2,
    );
}

/// Circular light with positive helicity about its beam (χ = +45°) drives σ⁺ when the beam runs
/// along the quantisation axis and σ⁻ when against it (common practice); on a J = 0 → J' = 1 line
/// only one excited sublevel is then reached, a closed two-level atom with (s/2)/(1 + s) = 1/3
/// at s = 2 (Foot, *Atomic Physics*, OUP 2005, ch. 7).
#[test]
fn helicity_about_the_beam_picks_the_sublevel() {
    for (direction, target, dark) in [
        ("[0, 0, 1]", "e1_m1", "e1_m-1"),
        ("[0, 0, -1]", "e1_m-1", "e1_m1"),
    ] {
        let body = format!(
            r#"
```atom j0
lower     = {{ J = 0 }}
upper     = {{ J = 1 }}
frequency = "2π × 500 THz"
linewidth = "2π × 2 MHz"
```

```light probe
drives       = "g0_m0 -> {target}"
saturation   = 2
direction    = {direction}
polarization = {{ vector = [1, 0, 0], ellipticity = "45 deg" }}
```

```evolve line
steady  = true
observe = ["population({target})", "population({dark})", "population(e1_m0)"]
```

```check
"line.final.population({target})" = {{ near = "1/3", within = 1e-12 }}
"line.final.population({dark})"   = {{ below = 1e-14 }}
"line.final.population(e1_m0)"    = {{ below = 1e-14 }}
```
"#
        );
        holds("helicity", &body, 3);
    }
}

/// A polarisation tilted by θ from the axis on a J = 1 → J' = 1 line at zero field leaves the
/// dark state m = 0 along the polarisation, whose population along z is d¹₀₀(θ)² = cos²θ
/// (Edmonds, *Angular Momentum in Quantum Mechanics*, 1957, table 4.1); groups sum sublevels.
#[test]
fn tilted_polarisation_tilts_the_dark_state() {
    holds(
        "tilt",
        r#"
```params
theta = "25 deg"
```

```atom j1
lower     = { J = 1, L = 0, S = 1 }
upper     = { J = 1, L = 1, S = 1 }
frequency = "2π × 300 THz"
linewidth = "2π × 1 MHz"
```

```light pump
drives       = "g1 -> e1"
intensity    = "1 mW/cm^2"
polarization = { angle = "theta" }
```

```evolve dark
steady  = true
observe = ["population(g1_m0)", "population(g1_m-1, g1_m1)", "population(e)", "population(g)"]
```

```check
"dark.final.population(g1_m0)"         = { near = "cos(theta)^2", within = 1e-10 }
"dark.final.population(g1_m-1, g1_m1)" = { near = "sin(theta)^2", within = 1e-10 }
"dark.final.population(e)"             = { below = 1e-12 }
"dark.final.population(g)"             = { near = 1, within = 1e-12 }
```
"#,
        4,
    );
}

/// An atom moving at v along a beam sees its carrier at ω − k·v (first-order Doppler shift,
/// common practice): a line detuned by Δ₀ in the lab is resonant for v = Δ₀ c/ω. The parabola
/// through the three highest grid points finds the Lorentzian's centre to about 1e-5 of v on this
/// grid; on a five times coarser one it missed by 2.4e-4.
#[test]
fn a_moving_atom_sees_the_doppler_shift() {
    holds(
        "doppler",
        r#"
```params
w0     = "2π × 384 THz"
delta0 = "2π × 20 MHz"
v      = "0 m/s"
```

```atom two
[levels]
g = "0 Hz"
e = "w0"

[decay]
"e -> g" = "2π × 6 MHz"
```

```light probe
drives    = "g -> e"
detuning  = "delta0"
rabi      = "2π × 1 MHz"
direction = [0, 1, 1]
```

```evolve line
steady   = true
velocity = ["0 m/s", "v / sqrt(2)", "v / sqrt(2)"]
observe  = ["population(e)"]
sweep.v  = { from = "0 m/s", to = "30 m/s", points = 301 }
```

```check
"argmax(line.final.population(e))" = { near = "delta0 × c / (w0 + delta0)", rel = 1e-4 }
```
"#,
        1,
    );
}

/// A group spreads a mixture's weight evenly over its sublevels; `population(g)` sums them.
#[test]
fn groups_in_mixtures_and_observables() {
    holds(
        "groups",
        r#"
```atom rb
species = "87Rb"
line    = "D2"
```

```sequence idle
[[step]]
wait = "1 ns"
```

```evolve mix
sequence = "idle"
start    = { mixture = { g1 = 1, g2_m2 = 1 } }
observe  = ["population(g1_m0)", "population(g2_m2)", "population(g)", "population(g1, g1_m1)"]
```

```check
"mix.final.population(g1_m0)"        = { near = "1/6", within = 1e-12 }
"mix.final.population(g2_m2)"        = { near = "1/2", within = 1e-12 }
"mix.final.population(g)"            = { near = 1, within = 1e-12 }
"mix.final.population(g1, g1_m1)"    = { near = "1/2", within = 1e-12 }
```
"#,
        4,
    );
}

/// Mistakes with real atoms are refused with located, specific messages.
#[test]
fn real_atom_mistakes_are_refused() {
    let atom = |extra: &str| {
        format!(
            "```atom rb\nspecies = \"87Rb\"\nline = \"D2\"\n{extra}```\n\n```light p\ndrives = \"g2 -> e3\"\nintensity = \"1 mW/cm^2\"\n```\n\n```evolve s\nsteady = true\nobserve = [\"population(e)\"]\n```\n"
        )
    };
    let t = refused("species", &atom("").replace("87Rb", "87Rx"));
    assert!(
        t.contains("`87Rx` is not in the species table") && t.contains("133Cs"),
        "{t}"
    );
    let t = refused("keep", &atom("keep = [\"g2\", \"e4\"]\n"));
    assert!(
        t.contains("`e4` is not a hyperfine level") && t.contains("`e3`"),
        "{t}"
    );
    // F' = 2 decays to F = 1 as well, which is not kept.
    let t = refused("decay-out", &atom("keep = [\"g2\", \"e2\", \"e3\"]\n"));
    assert!(t.contains("cannot be expanded"), "{t}");
    let t = refused("levels-too", &atom("[levels]\ng = \"0 Hz\"\n"));
    assert!(t.contains("either hand-made `levels` or a line"), "{t}");
    let t = refused(
        "rabi-group",
        &atom("").replace("intensity = \"1 mW/cm^2\"", "rabi = \"2π × 1 MHz\""),
    );
    assert!(t.contains("needs one sublevel transition"), "{t}");
    let t = refused("forbidden", &atom("").replace("g2 -> e3", "g1_m1 -> e3_m3"));
    assert!(t.contains("is not a transition"), "{t}");
    let t = refused(
        "coherence-group",
        &atom("").replace("population(e)", "coherence(g2, e3)"),
    );
    assert!(t.contains("is a group of levels"), "{t}");
    let t = refused(
        "elliptical",
        &atom("").replace(
            "intensity = \"1 mW/cm^2\"",
            "intensity = \"1 mW/cm^2\"\npolarization = { vector = [1, 0, 0], ellipticity = \"10 deg\" }",
        ),
    );
    assert!(t.contains("needs the light's `direction`"), "{t}");
    let t = refused(
        "transverse",
        &atom("").replace(
            "intensity = \"1 mW/cm^2\"",
            "intensity = \"1 mW/cm^2\"\ndirection = [1, 0, 0]\npolarization = { vector = [1, 1, 0] }",
        ),
    );
    assert!(t.contains("perpendicular"), "{t}");
    let t = refused(
        "moving",
        &atom("").replace(
            "steady = true",
            "steady = true\nvelocity = [\"1 m/s\", \"0 m/s\", \"0 m/s\"]",
        ),
    );
    assert!(t.contains("has no `direction`"), "{t}");
    let t = refused(
        "no-g",
        "```atom x\nlower = { J = 1 }\nupper = { J = 2 }\nfrequency = \"2π × 1 THz\"\nlinewidth = \"2π × 1 MHz\"\nmagnetic_field = \"1 G\"\n```\n",
    );
    assert!(t.contains("needs `g_J` (or `L` and `S`)"), "{t}");
    let t = refused(
        "bad-lande",
        "```atom x\nlower = { J = 1, L = 0, S = \"1/2\" }\nupper = { J = 1 }\nfrequency = \"2π × 1 THz\"\nlinewidth = \"2π × 1 MHz\"\n```\n",
    );
    assert!(t.contains("cannot come from L = 0 and S = 1/2"), "{t}");
    let t = refused(
        "bad-j",
        "```atom x\nlower = { J = 1 }\nupper = { J = \"5/4\" }\nfrequency = \"2π × 1 THz\"\nlinewidth = \"2π × 1 MHz\"\n```\n",
    );
    assert!(t.contains("whole or half-integer"), "{t}");
}
