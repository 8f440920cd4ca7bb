//! End-to-end tests of the expression language: values, constants, errors and their spans,
//! the Hz warning, robustness on arbitrary input, and compiled-versus-evaluated agreement.

use std::collections::HashMap;
use std::f64::consts::PI;

use super::*;

fn env(params: &[(&str, f64, Dim)]) -> HashMap<String, Quantity> {
    params
        .iter()
        .map(|&(name, value, dim)| (name.to_string(), Quantity::new(value, dim)))
        .collect()
}

fn no_params() -> HashMap<String, Quantity> {
    HashMap::new()
}

fn value(src: &str) -> Quantity {
    parse(src)
        .and_then(|e| e.eval(&no_params()))
        .unwrap_or_else(|e| panic!("{src}: {e:?}"))
}

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * b.abs()
}

fn assert_value(src: &str, expected: f64, dim: Dim) {
    let q = value(src);
    assert!(
        close(q.value, expected, 1e-12),
        "{src}: {} != {expected}",
        q.value
    );
    assert_eq!(q.dim, dim, "{src}");
}

/// The error for `src` evaluated in `params`.
fn error_in(src: &str, params: &HashMap<String, Quantity>) -> ExprError {
    match parse(src).and_then(|e| e.eval(params)) {
        Ok(q) => panic!("{src}: expected an error, got {q:?}"),
        Err(e) => e,
    }
}

fn error(src: &str) -> ExprError {
    error_in(src, &no_params())
}

/// The text an error's span points at.
fn pointed<'a>(src: &'a str, e: &ExprError) -> &'a str {
    &src[e.span.clone()]
}

#[test]
fn units_and_precedence() {
    // (10 mW)/(cm²) = 10⁻² W / 10⁻⁴ m² = 100 W/m².
    assert_value("10 mW/cm^2", 100.0, Dim::INTENSITY);
    assert_value("2π × 5 MHz", 2.0 * PI * 5e6, Dim::FREQUENCY);
    assert!(close(value("2π × 5 MHz").value, 3.14159e7, 1e-5));
    assert_value("2*pi*5 MHz", 2.0 * PI * 5e6, Dim::FREQUENCY);
    assert_value("-2π × 1 MHz", -2.0 * PI * 1e6, Dim::FREQUENCY);
    assert_value("1 G", 1e-4, Dim::MAGNETIC_FIELD);
    assert_value("1 GHz", 1e9, Dim::FREQUENCY);
    assert_value("1.5e-3 T", 1.5e-3, Dim::MAGNETIC_FIELD);
    assert_value("2^3^2", 512.0, Dim::DIMENSIONLESS);
    assert_value("-2^2", -4.0, Dim::DIMENSIONLESS);
    assert_value("2^-1", 0.5, Dim::DIMENSIONLESS);
    assert_value("10^6 Hz", 1e6, Dim::FREQUENCY);
    assert_value("1e6 rad/s", 1e6, Dim::FREQUENCY);
    assert_value("780.24 nm", 780.24e-9, Dim::LENGTH);
    assert_value("6.0 V/m", 6.0, Dim::ELECTRIC_FIELD);
    assert_value("300 µK", 300e-6, Dim::TEMPERATURE);
    assert_value("1.2 µs", 1.2e-6, Dim::TIME);
    assert_value("π/2", PI / 2.0, Dim::DIMENSIONLESS);
    assert_value("90 deg", PI / 2.0, Dim::DIMENSIONLESS);
    assert_value("min(1 s, 2 ms)", 2e-3, Dim::TIME);
    assert_value("max(1, 2, 3)", 3.0, Dim::DIMENSIONLESS);
    assert_value("0.5*(1 + tanh(0))", 0.5, Dim::DIMENSIONLESS);
    assert_value("sech(0)", 1.0, Dim::DIMENSIONLESS);
    assert_value("2 (3 + 4)", 14.0, Dim::DIMENSIONLESS);
    assert_value("(1 + 1)(2 + 2)", 8.0, Dim::DIMENSIONLESS);
    assert_value("2 ** 3", 8.0, Dim::DIMENSIONLESS);
    assert_value("3 − 1", 2.0, Dim::DIMENSIONLESS);
    assert_value("2·3⋅4", 24.0, Dim::DIMENSIONLESS);
    assert_value("5 kg m/s^2", 5.0, Dim::FORCE);
    // 1 eV = e × 1 V exactly.
    assert_value("1 eV", 1.602_176_634e-19, Dim::ENERGY);
    let amu = value("87 amu");
    assert!(close(amu.value, 87.0 * 1.660_539_066_60e-27, 1e-12));
    assert_eq!(amu.dim, Dim::MASS);
    for micro in ["5 us", "5 µs", "5 μs"] {
        assert_value(micro, 5e-6, Dim::TIME);
    }
    // ħ = h/(2π) by definition, and juxtaposition binds tighter than `/`.
    assert_eq!(value("h/2π"), value("ħ"));
    assert_eq!(value("h/2π"), value("hbar"));
    // Juxtaposition binds tighter than `/`, looser than `^`: 2π² = 2 × π².
    assert_value("2π^2", 2.0 * PI * PI, Dim::DIMENSIONLESS);
}

#[test]
fn parameters_and_unary_minus() {
    let params = env(&[
        ("x", 3.0, Dim::DIMENSIONLESS),
        ("rabi", 2.0 * PI * 250e3, Dim::FREQUENCY),
        ("sigma", 2.0, Dim::DIMENSIONLESS),
        ("I", 100.0, Dim::INTENSITY),
        ("a", 4.0, Dim::TIME),
        ("b", 3.0, Dim::TIME),
        ("T", 5.0, Dim::TEMPERATURE),
    ]);
    let eval = |src: &str| {
        parse(src)
            .and_then(|e| e.eval(&params))
            .unwrap_or_else(|e| panic!("{src}: {e:?}"))
    };
    assert_eq!(eval("-x^2").value, -9.0);
    assert_eq!(eval("rabi/2").value, PI * 250e3);
    assert_eq!(eval("3 sigma").value, 6.0);
    assert_eq!(eval("min(a, b)").value, 3.0);
    // A parameter shadows the unit tesla where a value is expected, but not after a number.
    assert_eq!(eval("1/T").dim, Dim::TEMPERATURE.pow_halves(-2).unwrap());
    assert_eq!(eval("2 T").dim, Dim::MAGNETIC_FIELD);
    // sqrt(2I/(cε₀)) is the field amplitude of a plane wave of intensity I.
    let field = eval("sqrt(2*I/(c*ε₀))");
    assert_eq!(field.dim, Dim::ELECTRIC_FIELD);
    let expected = (2.0 * 100.0 / (299_792_458.0 * 8.854_187_812_8e-12_f64)).sqrt();
    assert!(close(field.value, expected, 1e-12));
}

#[test]
fn references_and_time() {
    let src = "exp(-(t - t0)^2 / (2*sigma^2)) * rabi + 5 MHz * t0";
    let e = parse(src).unwrap();
    let at = |name: &str, from: usize| {
        let start = from + src[from..].find(name).unwrap();
        (name.to_string(), start..start + name.len())
    };
    assert_eq!(
        e.references(),
        vec![at("t0", 0), at("sigma", 0), at("rabi", 0), at("t0", 40)]
    );
    assert!(e.uses_time());
    assert!(!parse("2π × 5 MHz").unwrap().uses_time());
    // Constants and units are no references, but `lookups` lists those a parameter could
    // shadow; the unit after a number is fixed.
    let e = parse("N h c / (2 m) + 3 m").unwrap();
    assert_eq!(e.references(), vec![]);
    let lookups: Vec<String> = e.lookups().into_iter().map(|(n, _)| n).collect();
    assert_eq!(lookups, ["N", "h", "c"]);
    let e = parse("ε₀ μ_B a₀").unwrap();
    assert_eq!(e.lookups().len(), 3);
    assert!(e.references().is_empty());
}

#[test]
fn constants_match_scipy_fixture() {
    // tests/fixtures/constants.json comes from tests/fixtures/make_constants.py (scipy 1.14.1, whose
    // tables are CODATA 2018).
    let fixture = include_str!(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/fixtures/constants.json"
    ));
    assert!(fixture.contains("\"codata\": \"2018\""));
    let ours = [
        ("hbar", "ħ"),
        ("h", "h"),
        ("c", "c"),
        ("epsilon_0", "ε₀"),
        ("e", "e"),
        ("bohr_radius", "a₀"),
        ("bohr_magneton", "μ_B"),
        ("k", "k_B"),
        ("m_e", "m_e"),
        ("atomic_mass_constant", "1 amu"),
    ];
    for (key, src) in ours {
        let reference = fixture_value(fixture, key).unwrap_or_else(|| panic!("{key} missing"));
        let q = value(src);
        assert!(
            close(q.value, reference, 1e-9),
            "{src}: {} vs scipy {reference}",
            q.value
        );
    }
    // Every alias agrees with its main spelling.
    for (a, b) in [
        ("ħ", "hbar"),
        ("ħ", "ℏ"),
        ("ε₀", "eps0"),
        ("a₀", "a0"),
        ("μ_B", "µ_B"),
        ("μ_B", "mu_B"),
        ("k_B", "kB"),
        ("π", "pi"),
        ("1 amu", "1 Da"),
    ] {
        assert_eq!(value(a), value(b), "{a} vs {b}");
    }
}

/// The number after `"key":` in the flat fixture; a hand parse keeps the crate std-only.
fn fixture_value(json: &str, key: &str) -> Option<f64> {
    let pattern = format!("\"{key}\":");
    let start = json.find(&pattern)? + pattern.len();
    let rest = &json[start..];
    let end = rest.find([',', '\n', '}'])?;
    rest[..end].trim().parse().ok()
}

#[test]
fn dimension_errors_point_at_the_operator() {
    let src = "2π × 1 MHz + 1 µs";
    let e = error(src);
    assert_eq!(e.kind, ErrorKind::DimensionMismatch);
    assert_eq!(e.message, "cannot add a time to an angular frequency");
    assert_eq!(pointed(src, &e), "+");
    assert!(e.hint.unwrap().contains("`1 µs` is a time"));
    let src = "1 m − 2 s";
    let e = error(src);
    assert_eq!(e.message, "cannot subtract a time from a length");
    assert_eq!(pointed(src, &e), "−");
    let src = "min(1 s, 2 m)";
    let e = error(src);
    assert_eq!(e.kind, ErrorKind::DimensionMismatch);
    assert_eq!(pointed(src, &e), "2 m");
    let src = "exp(2 µs)";
    let e = error(src);
    assert_eq!(e.kind, ErrorKind::DimensionedArgument);
    assert_eq!(
        e.message,
        "the argument of `exp` must be a number without dimension, but `2 µs` is a time"
    );
    assert_eq!(pointed(src, &e), "2 µs");
    let src = "sin(2π × 5 MHz)";
    assert_eq!(pointed(src, &error(src)), "2π × 5 MHz");
    let src = "1 + sqrt(3 s)";
    let e = error(src);
    assert_eq!(e.kind, ErrorKind::OddDimension);
    assert_eq!(pointed(src, &e), "3 s");
    assert_eq!(value("sqrt(4 m^2)").dim, Dim::LENGTH);
    let src = "(2 s)^(1 s)";
    let e = error(src);
    assert_eq!(e.kind, ErrorKind::BadExponent);
    assert_eq!(pointed(src, &e), "(1 s)");
    let src = "(2 s)^0.3";
    let e = error(src);
    assert_eq!(e.kind, ErrorKind::BadExponent);
    assert_eq!(pointed(src, &e), "0.3");
    let src = "(4 s)^0.5";
    assert_eq!(error(src).kind, ErrorKind::OddDimension);
    assert_eq!(value("(4 s^2)^0.5").value, 2.0);
    assert_eq!(value("(4 s^2)^0.5").dim, Dim::TIME);
    assert_eq!(error("m^100 * m^100").kind, ErrorKind::DimensionOverflow);
}

#[test]
fn error_catalogue() {
    let params = env(&[("rabi", 1.0, Dim::FREQUENCY), ("sigma", 1.0, Dim::TIME)]);
    // (source, kind, text the span points at, start of message)
    let cases: &[(&str, ErrorKind, &str, &str)] = &[
        (
            "2 $ 3",
            ErrorKind::UnexpectedCharacter,
            "$",
            "unexpected character `$`",
        ),
        (
            "2π ×",
            ErrorKind::UnexpectedEnd,
            "×",
            "the expression ends after `2π ×`; a value is expected",
        ),
        (
            "(1 + 2",
            ErrorKind::UnbalancedParenthesis,
            "(",
            "the `(` is never closed",
        ),
        (
            "1 + (2 * (3)",
            ErrorKind::UnbalancedParenthesis,
            "(",
            "the `(` is never closed",
        ),
        (
            "1 + 2)",
            ErrorKind::UnbalancedParenthesis,
            ")",
            "the `)` has no matching `(`",
        ),
        (
            "sqrt(2",
            ErrorKind::UnbalancedParenthesis,
            "(",
            "the `(` is never closed",
        ),
        (
            "rabbi/2",
            ErrorKind::UnknownName,
            "rabbi",
            "`rabbi` is not a parameter",
        ),
        (
            "2π × 5 Mhz",
            ErrorKind::UnknownName,
            "Mhz",
            "`Mhz` is not a parameter",
        ),
        (
            "sinh(1)",
            ErrorKind::UnknownFunction,
            "sinh(",
            "`sinh` is not a known function",
        ),
        (
            "sqrt(1, 2)",
            ErrorKind::ArgumentCount,
            "sqrt(1, 2)",
            "`sqrt` takes 1 argument, but 2 were given",
        ),
        (
            "min(1)",
            ErrorKind::ArgumentCount,
            "min(1)",
            "`min` takes 2 or more arguments, but 1 was given",
        ),
        (
            "exp()",
            ErrorKind::ArgumentCount,
            "exp()",
            "`exp` takes 1 argument, but 0 were given",
        ),
        (
            "sqrt 2",
            ErrorKind::MissingCall,
            "sqrt",
            "`sqrt` is a function",
        ),
        (
            "1/(2 - 2)",
            ErrorKind::DivisionByZero,
            "(2 - 2)",
            "division by zero: `(2 - 2)` is zero",
        ),
        (
            "1e308 * 10",
            ErrorKind::NotFinite,
            "1e308 * 10",
            "`1e308 * 10` is too large",
        ),
        (
            "exp(1000)",
            ErrorKind::NotFinite,
            "exp(1000)",
            "`exp(1000)` is too large",
        ),
        (
            "1e999 s",
            ErrorKind::NumberTooLarge,
            "1e999",
            "the number `1e999` is too large",
        ),
        ("", ErrorKind::Empty, "", "an empty expression"),
        ("   ", ErrorKind::Empty, "   ", "an empty expression"),
        (
            "t/sigma",
            ErrorKind::TimeNotAllowed,
            "t",
            "the time variable `t` is only available",
        ),
        (
            "sqrt(-4)",
            ErrorKind::Domain,
            "-4",
            "`sqrt` needs an argument of at least zero",
        ),
        (
            "ln(0)",
            ErrorKind::Domain,
            "0",
            "`ln` needs a positive argument",
        ),
        (
            "(-8)^(1/3)",
            ErrorKind::NotFinite,
            "(-8)^(1/3)",
            "`(-8)^(1/3)` is not a real number",
        ),
        (
            "2 3",
            ErrorKind::UnexpectedToken,
            "3",
            "unexpected number `3`",
        ),
        ("1, 2", ErrorKind::UnexpectedToken, ",", "unexpected `,`"),
        (
            "2 * * 3",
            ErrorKind::UnexpectedToken,
            "*",
            "a value is expected before `*`",
        ),
        (
            "()",
            ErrorKind::UnexpectedToken,
            ")",
            "a value is expected before `)`",
        ),
        (
            "min(1,)",
            ErrorKind::UnexpectedToken,
            ")",
            "a value is expected before `)`",
        ),
        ("µ s", ErrorKind::UnknownName, "µ", "`µ` is not a parameter"),
    ];
    for &(src, kind, at, message) in cases {
        let e = error_in(src, &params);
        assert_eq!(e.kind, kind, "{src}: {e:?}");
        assert_eq!(pointed(src, &e), at, "{src}: {e:?}");
        assert!(e.message.starts_with(message), "{src}: {e:?}");
        // House style: lowercase start (or a quoted name), no trailing period.
        assert!(!e.message.ends_with('.'), "{src}");
        let first = e.message.chars().next().unwrap();
        assert!(first.is_lowercase() || first == '`', "{src}");
    }
    // Suggestions come from parameters, units and functions.
    assert_eq!(
        error_in("rabbi/2", &params).hint.as_deref(),
        Some("did you mean `rabi`?")
    );
    assert_eq!(error("5 Mhz").hint.as_deref(), Some("did you mean `MHz`?"));
    assert_eq!(
        error("sinh(1)").hint.as_deref(),
        Some("did you mean `sin`?")
    );
    assert_eq!(
        error_in("2 sigm", &params).hint.as_deref(),
        Some("did you mean `sigma`?")
    );
    assert_eq!(error("hbarr").hint.as_deref(), Some("did you mean `hbar`?"));
    assert!(error("foo(2)").hint.unwrap().contains("sqrt"));
}

#[test]
fn nesting_is_capped() {
    let deep = format!("{}1{}", "(".repeat(200), ")".repeat(200));
    let e = parse(&deep).unwrap_err();
    assert_eq!(e.kind, ErrorKind::TooDeep);
    assert_eq!(pointed(&deep, &e), "(");
    assert_eq!(
        parse(&format!("{}1", "-".repeat(100_000)))
            .unwrap_err()
            .kind,
        ErrorKind::TooDeep
    );
    assert_eq!(
        parse(&"2^".repeat(100_000)).unwrap_err().kind,
        ErrorKind::TooDeep
    );
    assert_eq!(
        parse(&"sqrt(".repeat(10_000)).unwrap_err().kind,
        ErrorKind::TooDeep
    );
    // Sixty levels are fine; a long flat sum is no nesting at all.
    let ok = format!("{}1{}", "(".repeat(60), ")".repeat(60));
    assert_eq!(value(&ok).value, 1.0);
    let long = vec!["1"; 100_000].join("+");
    assert_eq!(value(&long).value, 100_000.0);
    let product = vec!["1.0001"; 50_000].join(" * ");
    assert!(value(&product).value.is_finite());
}

#[test]
fn time_variable() {
    let params = env(&[("t0", 2e-6, Dim::TIME), ("sigma", 0.5e-6, Dim::TIME)]);
    let e = parse("exp(-(t - t0)^2 / (2 sigma^2))").unwrap();
    let err = e.eval(&params).unwrap_err();
    assert_eq!(err.kind, ErrorKind::TimeNotAllowed);
    assert_eq!(err.span, 6..7);
    assert_eq!(
        err.message,
        "the time variable `t` is only available in envelope and chirp formulas"
    );
    let f = e.compile(&params).unwrap();
    assert_eq!(f.dim(), Dim::DIMENSIONLESS);
    assert_eq!(f.eval(2e-6), 1.0);
    let one_sigma = f.eval(2.5e-6);
    assert!(close(one_sigma, (-0.5f64).exp(), 1e-12));
    let shared = f.clone().into_fn();
    assert_eq!(shared(2.5e-6), one_sigma);
    assert_eq!(f.constant(), None);
    // Compile-time dimension errors, not per call.
    let src = "exp(t)";
    let err = parse(src).unwrap().compile(&params).unwrap_err();
    assert_eq!(err.kind, ErrorKind::DimensionedArgument);
    assert_eq!(pointed(src, &err), "t");
    let src = "2^(t/t0)";
    let err = parse(src).unwrap().compile(&params).unwrap_err();
    assert_eq!(err.kind, ErrorKind::BadExponent);
    assert_eq!(pointed(src, &err), "(t/t0)");
    let src = "t + 1 m";
    let err = parse(src).unwrap().compile(&params).unwrap_err();
    assert_eq!(err.message, "cannot add a length to a time");
    // A chirp: angular frequency per time times time.
    let chirp = parse("2π × 1 MHz/µs × (t - t0)")
        .unwrap()
        .compile(&params)
        .unwrap();
    assert_eq!(chirp.dim(), Dim::FREQUENCY);
    assert_eq!(chirp.eval(2e-6), 0.0);
    // Constant formulas are folded, including errors in their constant parts.
    let constant = parse("2π × 5 MHz").unwrap().compile(&params).unwrap();
    assert_eq!(constant.constant(), Some(2.0 * PI * 5e6));
    let err = parse("t / (t0 - t0)")
        .unwrap()
        .compile(&params)
        .unwrap_err();
    assert_eq!(err.kind, ErrorKind::DivisionByZero);
    // Non-finite results are the integrator's to check.
    let blowup = parse("1/(t - t0)").unwrap().compile(&params).unwrap();
    assert!(blowup.eval(2e-6).is_infinite());
    assert_eq!(parse("t").unwrap().compile(&params).unwrap().eval(3.0), 3.0);
    assert_eq!(
        parse("t").unwrap().compile(&params).unwrap().dim(),
        Dim::TIME
    );
}

#[test]
fn hz_warning() {
    let warns = |src: &str, params: &HashMap<String, Quantity>| {
        let q = parse(src).and_then(|e| e.eval(params)).unwrap();
        bare_hz_warning(&q)
    };
    let none = no_params();
    let src = "5 MHz";
    let (span, message) = warns(src, &none).unwrap();
    assert_eq!(&src[span], "MHz");
    assert!(
        message.starts_with("`5 MHz` is read as 5×10⁶ rad/s"),
        "{message}"
    );
    assert!(message.contains("write `2π × 5 MHz`"));
    assert_eq!(warns("2π × 5 MHz", &none), None);
    assert_eq!(warns("2*pi*5 MHz", &none), None);
    assert_eq!(warns("5 MHz × 2π", &none), None);
    assert_eq!(warns("2π (5 MHz + 1 MHz)", &none), None);
    assert_eq!(warns("0 Hz", &none), None);
    assert_eq!(warns("1e6 rad/s", &none), None);
    // h × ν uses the Hz deliberately, and the result is an energy anyway.
    assert_eq!(value("h × 5 MHz").bare_hz, None);
    assert_eq!(warns("h × 5 MHz / ħ", &none), None);
    assert!(warns("ħ × 5 MHz / ħ", &none).is_some());
    // A sum warns if either side does, at the bare one's Hz unit.
    let src = "2π × 5 MHz + 1 kHz";
    let (span, _) = warns(src, &none).unwrap();
    assert_eq!(&src[span], "kHz");
    // Inherited through a parameter: the span is in the parameter's own source.
    let rabi = value("5 MHz");
    assert_eq!(rabi.bare_hz, Some(2..5));
    let mut params = no_params();
    params.insert("rabi".to_string(), rabi);
    let (span, _) = warns("rabi/2", &params).unwrap();
    assert_eq!(span, 2..5);
    assert_eq!(warns("2π rabi", &params), None);
    let mut params = no_params();
    params.insert("rabi".to_string(), value("2π × 5 MHz"));
    assert_eq!(warns("rabi/2", &params), None);
}

#[test]
fn expect_dim_messages() {
    let q = value("1.2 µs");
    let e = expect_dim(&q, Dim::FREQUENCY, "rabi", 0..4).unwrap_err();
    assert_eq!(e.kind, ErrorKind::WrongDimension);
    assert_eq!(
        e.message,
        "`rabi` has the dimension of a time; an angular frequency is expected"
    );
    assert_eq!(e.hint.as_deref(), Some("write it like `2π × 250 kHz`"));
    assert_eq!(e.span, 0..4);
    assert!(expect_dim(&q, Dim::TIME, "rabi", 0..4).is_ok());
}

/// A small seeded generator (xorshift64*), so failures reproduce.
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_f491_4f6c_dd1d)
    }

    fn below(&mut self, n: usize) -> usize {
        (self.next() % n as u64) as usize
    }

    fn pick<'a>(&mut self, items: &[&'a str]) -> &'a str {
        items[self.below(items.len())]
    }

    fn unit(&mut self) -> f64 {
        (self.next() >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// Runs every entry point on `src`; the test is that nothing panics.
fn exercise(src: &str, params: &HashMap<String, Quantity>) {
    let Ok(e) = parse(src) else { return };
    let _ = e.references();
    let _ = e.lookups();
    if let Ok(q) = e.eval(params) {
        assert!(q.value.is_finite(), "{src}");
        let _ = bare_hz_warning(&q);
        let _ = format_quantity(q.value, q.dim);
    }
    if let Ok(f) = e.compile(params) {
        let _ = f.eval(1e-6);
    }
}

#[test]
fn arbitrary_input_never_panics() {
    let params = env(&[
        ("rabi", 1e6, Dim::FREQUENCY),
        ("sigma", 1e-6, Dim::TIME),
        ("t0", 1e-6, Dim::TIME),
    ]);
    let mut rng = Rng(0x5eed_1234_abcd_0001);
    // Random bytes, read as UTF-8 with replacement.
    for _ in 0..20_000 {
        let len = rng.below(24);
        let bytes: Vec<u8> = (0..len).map(|_| rng.next() as u8).collect();
        exercise(&String::from_utf8_lossy(&bytes), &params);
    }
    // Random strings over the language's own alphabet hit the parser harder.
    let pieces = [
        "2", "π", "×", "·", "−", "-", "+", "*", "/", "^", "(", ")", ",", " ", "MHz", "µs", "μ",
        "µ", "ε₀", "₀", "t", "rabi", "sigma", "sqrt", "exp", "min", "e", "1e", "1e-", ".", "E5",
        "ħ", "**", "0", "1e308", "nan", "inf", "G", "T", "m", "cm", "^2", "é", "\u{0}", "²",
    ];
    for _ in 0..20_000 {
        let n = rng.below(12);
        let src: String = (0..n).map(|_| rng.pick(&pieces)).collect();
        exercise(&src, &params);
    }
    // Mutations of valid expressions: insert, delete or replace one character.
    let valid = [
        "2π × 250 kHz",
        "10 mW/cm^2",
        "sqrt(2*rabi/(c*ε₀))",
        "exp(-(t - t0)^2 / (2*sigma^2))",
        "0.5*(1 + tanh(t/sigma))",
        "min(sigma, 3 µs)",
        "-2π × 1 MHz",
        "h/2π",
    ];
    let alphabet: Vec<char> = "0123456789.eE+-−*×·/^(), πµμtsmMHzk₀²é".chars().collect();
    for _ in 0..30_000 {
        let mut chars: Vec<char> = rng.pick(&valid).chars().collect();
        for _ in 0..1 + rng.below(3) {
            let at = rng.below(chars.len() + 1);
            let c = alphabet[rng.below(alphabet.len())];
            match rng.below(3) {
                0 => chars.insert(at, c),
                1 if at < chars.len() => {
                    chars.remove(at);
                }
                _ if at < chars.len() => chars[at] = c,
                _ => chars.push(c),
            }
        }
        exercise(&chars.into_iter().collect::<String>(), &params);
    }
}

/// Random formulas in `t`, written as templates so the same formula can be compiled (with
/// `t`) and evaluated (with `t` replaced by a parameter `tt` holding the same time).
fn random_formula(rng: &mut Rng, depth: usize) -> String {
    let leaf = |rng: &mut Rng| match rng.below(5) {
        0 => "{t}/tau".to_string(),
        1 => "a".to_string(),
        2 => "b".to_string(),
        3 => format!("{:.3}", rng.unit() * 4.0 - 2.0),
        _ => "({t} - t0)/tau".to_string(),
    };
    if depth == 0 {
        return leaf(rng);
    }
    let sub = |rng: &mut Rng| random_formula(rng, depth - 1);
    match rng.below(11) {
        0 => format!("{} + {}", sub(rng), sub(rng)),
        1 => format!("{} - {}", sub(rng), sub(rng)),
        2 => format!("{} * {}", sub(rng), sub(rng)),
        3 => format!("({}) / ({})", sub(rng), sub(rng)),
        4 => format!("({})^{}", sub(rng), rng.below(4)),
        5 => format!("-({})", sub(rng)),
        6 => format!(
            "{}({})",
            rng.pick(&["exp", "sin", "cos", "tanh", "sech", "abs"]),
            sub(rng)
        ),
        7 => format!("sqrt(abs({}))", sub(rng)),
        8 => format!("{}({}, {})", rng.pick(&["min", "max"]), sub(rng), sub(rng)),
        9 => format!("2π ({})", sub(rng)),
        _ => leaf(rng),
    }
}

#[test]
fn compiled_agrees_with_eval() {
    let mut rng = Rng(0x0dd_ba11_c0ff_ee00);
    let base = env(&[
        ("tau", 1.5e-6, Dim::TIME),
        ("t0", 2e-6, Dim::TIME),
        ("a", 0.7, Dim::DIMENSIONLESS),
        ("b", -1.3, Dim::DIMENSIONLESS),
    ]);
    let mut compared = 0;
    for _ in 0..3_000 {
        let template = random_formula(&mut rng, 4);
        let evaluated = parse(&template.replace("{t}", "tt")).unwrap();
        let compiled = match parse(&template.replace("{t}", "t")).and_then(|e| e.compile(&base)) {
            Ok(compiled) => compiled,
            // Compilation only refuses a constant zero divisor, which evaluation refuses too.
            Err(e) => {
                assert_eq!(e.kind, ErrorKind::DivisionByZero, "{template}");
                let mut params = base.clone();
                params.insert("tt".to_string(), Quantity::new(1e-6, Dim::TIME));
                // Spans differ: `tt` is a byte longer than `t`.
                let refused = evaluated.eval(&params).unwrap_err();
                assert_eq!(
                    (refused.kind, refused.message),
                    (e.kind, e.message),
                    "{template}"
                );
                continue;
            }
        };
        for _ in 0..4 {
            let t = rng.unit() * 6e-6 - 1e-6;
            let mut params = base.clone();
            params.insert("tt".to_string(), Quantity::new(t, Dim::TIME));
            let fast = compiled.eval(t);
            match evaluated.eval(&params) {
                Ok(q) => {
                    assert_eq!(q.dim, compiled.dim(), "{template}");
                    // Both run the same f64 operations in the same order.
                    assert!(
                        fast == q.value || close(fast, q.value, 1e-12),
                        "{template} at t = {t}: compiled {fast}, evaluated {}",
                        q.value
                    );
                    compared += 1;
                }
                // Evaluation also checks every step for division by zero and overflow, which
                // the compiled function leaves to the integrator.
                Err(e) => assert!(
                    matches!(e.kind, ErrorKind::DivisionByZero | ErrorKind::NotFinite),
                    "{template}: {e:?}"
                ),
            }
        }
    }
    assert!(compared > 10_000, "only {compared} comparisons");
}

#[test]
fn gaussian_timing() {
    // Reports the cost of one compiled Gaussian; `cargo run --release --example bench` gives
    // the optimised figure. The sum is checked so the loop cannot be optimised away.
    let params = env(&[("t0", 0.5e-6, Dim::TIME), ("sigma", 0.1e-6, Dim::TIME)]);
    let f = parse("exp(-(t - t0)^2 / (2 sigma^2))")
        .unwrap()
        .compile(&params)
        .unwrap();
    let n = 1_000_000;
    let start = std::time::Instant::now();
    let mut sum = 0.0;
    for i in 0..n {
        sum += f.eval(f64::from(i) * 1e-12);
    }
    let elapsed = start.elapsed();
    // ∫ exp(-(t - t0)²/(2σ²)) dt over [0, 1 µs] ≈ σ√(2π); the sum is that over the step 1 ps.
    let expected = 0.1e-6 * (2.0 * PI).sqrt() / 1e-12;
    assert!(close(sum, expected, 1e-3), "{sum} vs {expected}");
    println!(
        "compiled Gaussian: {:.1} ns per call",
        elapsed.as_secs_f64() * 1e9 / f64::from(n)
    );
}
