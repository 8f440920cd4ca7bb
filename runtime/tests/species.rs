//! The species table's masses against the `periodictable` package (fixture
//! `fixtures/masses.json`, made by `fixtures/make_masses.py`).

use fieldbook_runtime::species::SPECIES;

/// Each mass within 5e-9 u of periodictable 2.0.2's (which rounds to about 1e-9 u; the two
/// compilations are different atomic-mass evaluations, so a few parts in 1e10 may differ).
#[test]
fn masses_match_periodictable() {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/fixtures/masses.json"
    ))
    .unwrap();
    let f: serde_json::Value = serde_json::from_str(&text).unwrap();
    let masses = f["masses_u"].as_object().unwrap();
    assert_eq!(masses.len(), SPECIES.len());
    for s in SPECIES {
        let want = masses[s.name].as_f64().unwrap();
        println!("{}: table {} u, periodictable {want} u", s.name, s.mass_u);
        assert!(
            (s.mass_u - want).abs() < 5e-9,
            "{}: {} vs {want}",
            s.name,
            s.mass_u
        );
    }
}
