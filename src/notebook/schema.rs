//! The one definition of every block kind and key: name, type, unit, default and meaning.
//! Unknown-key checks, "did you mean" suggestions and the SPEC.md key reference (tested against
//! this table) all come from here.

use super::diag::{Diagnostic, did_you_mean};
use super::tree::{Key, Node, Value};

/// One accepted key of a block kind.
#[derive(Clone, Copy, Debug)]
pub struct KeyDef {
    /// Dotted path from the body's top; upper-case components (`NAME`, `LEVEL`, `PARAM`,
    /// `TRANSITION`, `PATH`) stand for any key the user chooses; entries of an array of tables
    /// share their array's path.
    pub path: &'static str,
    /// TOML type and what the text means.
    pub ty: &'static str,
    /// Expected unit (dimension), or `—`.
    pub unit: &'static str,
    /// Default when absent, or `required`.
    pub default: &'static str,
    /// What it does.
    pub doc: &'static str,
}

const fn k(
    path: &'static str,
    ty: &'static str,
    unit: &'static str,
    default: &'static str,
    doc: &'static str,
) -> KeyDef {
    KeyDef {
        path,
        ty,
        unit,
        default,
        doc,
    }
}

/// Whether a kind's info string needs a name.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Naming {
    /// `KIND NAME` only.
    Required,
    /// `KIND` or `KIND NAME`.
    Optional,
}

/// One block kind.
#[derive(Clone, Copy, Debug)]
pub struct KindDef {
    /// The kind word.
    pub kind: &'static str,
    /// Whether it needs a name.
    pub naming: Naming,
    /// Its keys.
    pub keys: &'static [KeyDef],
}

const EXPR: &str = "string (expression)";
const ANG: &str = "angular frequency (rad/s)";
const HALF: &str = "number or string (`\"3/2\"`)";

/// Every block kind with its keys. `rust` and `data` are reserved and have no keys.
pub const KINDS: &[KindDef] = &[
    KindDef {
        kind: "params",
        naming: Naming::Optional,
        keys: &[k(
            "NAME",
            "string (expression) or number",
            "any",
            "required",
            "a named parameter; may use parameters defined above it or elsewhere in the same block",
        )],
    },
    KindDef {
        kind: "atom",
        naming: Naming::Required,
        keys: &[
            k(
                "levels",
                "table",
                "—",
                "required unless `species` or `lower`",
                "hand-made levels, by name, in order",
            ),
            k(
                "levels.NAME",
                "string (expression) or table",
                ANG,
                "required",
                "the level's energy E/ħ (short form of `levels.NAME.energy`)",
            ),
            k(
                "levels.NAME.energy",
                EXPR,
                ANG,
                "required",
                "the level's energy E/ħ",
            ),
            k(
                "transitions",
                "table",
                "—",
                "one transition per `light` drive",
                "dipole transitions, keyed `\"LOWER -> UPPER\"`",
            ),
            k(
                "transitions.TRANSITION",
                "table",
                "—",
                "{}",
                "one dipole transition",
            ),
            k(
                "transitions.TRANSITION.dipole",
                EXPR,
                "dipole moment (C·m)",
                "\"e a0\"",
                "the dipole matrix element ⟨upper|d_q|lower⟩",
            ),
            k(
                "transitions.TRANSITION.q",
                "string: `pi`, `sigma+` or `sigma-`",
                "—",
                "\"pi\"",
                "the spherical component q of the dipole",
            ),
            k(
                "decay",
                "table",
                "—",
                "none",
                "spontaneous decay channels, keyed `\"FROM -> TO\"`",
            ),
            k(
                "decay.TRANSITION",
                EXPR,
                "rate (1/s)",
                "required",
                "the partial decay rate Γ from FROM to TO",
            ),
            k(
                "dephasing",
                "table",
                "—",
                "none",
                "pure dephasing, keyed by level",
            ),
            k(
                "dephasing.LEVEL",
                EXPR,
                "rate (1/s)",
                "required",
                "the rate at which every coherence with this level decays",
            ),
            k(
                "species",
                "string",
                "—",
                "none",
                "a species of the table (`notebooks-spec/SPECIES.md`), e.g. `\"87Rb\"`: the line's manifolds expand into Zeeman sublevels",
            ),
            k(
                "line",
                "string: `D1` or `D2`",
                "—",
                "required with `species`",
                "which line of the species",
            ),
            k(
                "lower",
                "table",
                "—",
                "with `upper`, instead of `species`",
                "the lower manifold by its quantum numbers",
            ),
            k(
                "lower.J",
                HALF,
                "—",
                "required",
                "electronic angular momentum J",
            ),
            k("lower.I", HALF, "—", "0", "nuclear spin I"),
            k(
                "lower.L",
                "integer",
                "—",
                "none",
                "orbital angular momentum L, for g_J by the Landé formula",
            ),
            k(
                "lower.S",
                HALF,
                "—",
                "none",
                "spin S, for g_J by the Landé formula",
            ),
            k(
                "lower.g_J",
                "number",
                "—",
                "Landé from L and S, else required when the field is not zero",
                "electronic g-factor g_J",
            ),
            k(
                "lower.g_I",
                "number",
                "—",
                "0",
                "nuclear g-factor g_I in units of μ_B (sign as in the species table)",
            ),
            k(
                "lower.A",
                EXPR,
                ANG,
                "\"0 Hz\"",
                "magnetic-dipole hyperfine constant A/ħ",
            ),
            k(
                "lower.B",
                EXPR,
                ANG,
                "\"0 Hz\"",
                "electric-quadrupole hyperfine constant B/ħ",
            ),
            k(
                "upper",
                "table",
                "—",
                "with `upper`, instead of `species`",
                "the upper manifold by its quantum numbers",
            ),
            k(
                "upper.J",
                HALF,
                "—",
                "required",
                "electronic angular momentum J",
            ),
            k("upper.I", HALF, "—", "0", "nuclear spin I"),
            k(
                "upper.L",
                "integer",
                "—",
                "none",
                "orbital angular momentum L, for g_J by the Landé formula",
            ),
            k(
                "upper.S",
                HALF,
                "—",
                "none",
                "spin S, for g_J by the Landé formula",
            ),
            k(
                "upper.g_J",
                "number",
                "—",
                "Landé from L and S, else required when the field is not zero",
                "electronic g-factor g_J",
            ),
            k(
                "upper.g_I",
                "number",
                "—",
                "0",
                "nuclear g-factor g_I in units of μ_B (sign as in the species table)",
            ),
            k(
                "upper.A",
                EXPR,
                ANG,
                "\"0 Hz\"",
                "magnetic-dipole hyperfine constant A/ħ",
            ),
            k(
                "upper.B",
                EXPR,
                ANG,
                "\"0 Hz\"",
                "electric-quadrupole hyperfine constant B/ħ",
            ),
            k(
                "frequency",
                EXPR,
                ANG,
                "with `lower`: `frequency` or `wavelength`",
                "the line's centroid angular frequency ω₀",
            ),
            k(
                "wavelength",
                EXPR,
                "length (m)",
                "—",
                "the line's vacuum wavelength λ (ω₀ = 2πc/λ)",
            ),
            k(
                "linewidth",
                EXPR,
                "rate (1/s)",
                "with `lower`: `linewidth` or `lifetime`",
                "the natural linewidth Γ of the upper manifold (its total decay rate)",
            ),
            k(
                "lifetime",
                EXPR,
                "time (s)",
                "—",
                "the upper manifold's lifetime τ = 1/Γ",
            ),
            k(
                "magnetic_field",
                EXPR,
                "magnetic field (T)",
                "\"0 G\"",
                "the field B along `axis`; sublevels are the hyperfine + Zeeman eigenstates at B",
            ),
            k(
                "zeeman",
                "string: `full` or `linear`",
                "—",
                "\"full\"",
                "sublevels diagonalised at the field, or the weak-field |F, m⟩ at E_F + g_F m μ_B B",
            ),
            k(
                "axis",
                "array of three numbers",
                "—",
                "[0, 0, 1]",
                "the quantisation axis (the field's direction) in the lab frame",
            ),
            k(
                "keep",
                "array of strings (level groups)",
                "—",
                "every sublevel",
                "the hyperfine levels to keep, e.g. `[\"g2\", \"e3\"]`; kept upper levels must decay only to kept lower ones",
            ),
        ],
    },
    KindDef {
        kind: "light",
        naming: Naming::Required,
        keys: &[
            k(
                "atom",
                "string (block name)",
                "—",
                "the last atom above",
                "the atom whose levels `drives` names",
            ),
            k(
                "drives",
                "string `\"LOWER -> UPPER\"`",
                "—",
                "required",
                "the reference transition for the detuning and the Rabi frequency; on a Zeeman atom a sublevel pair (`\"g2_m2 -> e3_m3\"`) or a hyperfine pair (`\"g2 -> e3\"`, the zero-field line)",
            ),
            k(
                "detuning",
                EXPR,
                ANG,
                "\"0 Hz\"",
                "Δ = ω_light − ω_transition (positive = blue)",
            ),
            k(
                "frequency",
                EXPR,
                ANG,
                "none",
                "the absolute carrier ω_light, instead of `detuning`",
            ),
            k(
                "rabi",
                EXPR,
                ANG,
                "one of rabi, field, intensity, saturation",
                "the peak Rabi frequency Ω on the reference transition",
            ),
            k(
                "field",
                EXPR,
                "electric field (V/m)",
                "one of rabi, field, intensity, saturation",
                "the peak electric-field amplitude E₀",
            ),
            k(
                "intensity",
                EXPR,
                "intensity (W/m²)",
                "one of rabi, field, intensity, saturation",
                "the peak intensity I = ½ c ε₀ E₀²",
            ),
            k(
                "saturation",
                EXPR,
                "—",
                "one of rabi, field, intensity, saturation",
                "s = I/I_sat of the `drives` transition for this polarisation: Ω = Γ √(s/2) there",
            ),
            k("phase", EXPR, "rad", "\"0\"", "the phase φ of the field"),
            k(
                "polarization",
                "string: `pi`, `sigma+` or `sigma-`, or a table",
                "—",
                "\"pi\"",
                "the light's polarisation relative to the quantisation axis",
            ),
            k(
                "polarization.angle",
                EXPR,
                "rad",
                "—",
                "linear, at this angle θ from the quantisation axis",
            ),
            k(
                "polarization.vector",
                "array of three numbers",
                "—",
                "—",
                "linear along this lab-frame vector, or the major axis of elliptical light",
            ),
            k(
                "polarization.ellipticity",
                EXPR,
                "rad",
                "0",
                "with `vector`: χ = ±45° is circular with ± helicity about `direction`",
            ),
            k(
                "direction",
                "array of three numbers",
                "—",
                "none",
                "the beam direction k̂ in the lab frame (for `ellipticity` and for an atom's `velocity`)",
            ),
            k(
                "linewidth",
                EXPR,
                ANG,
                "\"0 Hz\"",
                "the laser's FWHM linewidth (phase diffusion)",
            ),
            k(
                "chirp",
                "table",
                "—",
                "none",
                "a time-dependent frequency offset δ(t) added to the carrier",
            ),
            k(
                "chirp.rate",
                EXPR,
                "angular frequency per time (rad/s²)",
                "none",
                "linear chirp δ(t) = rate · t",
            ),
            k(
                "chirp.formula",
                "string (expression in t)",
                ANG,
                "none",
                "any δ(t), t from the start of the sequence",
            ),
        ],
    },
    KindDef {
        kind: "sequence",
        naming: Naming::Required,
        keys: &[
            k(
                "step",
                "array of tables",
                "—",
                "required",
                "pulses and waits, in order",
            ),
            k(
                "step.pulse",
                "string (light name)",
                "—",
                "pulse or wait",
                "a pulse of this light",
            ),
            k(
                "step.wait",
                EXPR,
                "time (s)",
                "pulse or wait",
                "a pause of this length",
            ),
            k(
                "step.duration",
                EXPR,
                "time (s)",
                "8σ (gaussian), 20 w (sech), else required",
                "the pulse length T",
            ),
            k(
                "step.shape",
                "string or table",
                "—",
                "\"square\"",
                "envelope: `square`, `blackman`, `sin2`, or a table below",
            ),
            k(
                "step.shape.gaussian",
                EXPR,
                "time (s)",
                "—",
                "Gaussian with rms width σ, centred in the pulse",
            ),
            k(
                "step.shape.sech",
                EXPR,
                "time (s)",
                "—",
                "sech((t − T/2)/w) with width w",
            ),
            k(
                "step.shape.tanh",
                EXPR,
                "time (s)",
                "—",
                "from + (to − from)(1 + tanh((t − T/2)/w))/2 with width w",
            ),
            k(
                "step.shape.ramp",
                "array of two numbers",
                "—",
                "—",
                "linear ramp [from, to] over the pulse",
            ),
            k(
                "step.shape.from",
                "number",
                "—",
                "0",
                "start value of a `tanh` ramp",
            ),
            k(
                "step.shape.to",
                "number",
                "—",
                "1",
                "end value of a `tanh` ramp",
            ),
            k(
                "step.shape.formula",
                "string (expression in t)",
                "dimensionless",
                "—",
                "any envelope f(t), t from the pulse start",
            ),
            k(
                "step.shape.steps",
                "table",
                "—",
                "—",
                "piecewise-constant steps",
            ),
            k(
                "step.shape.steps.values",
                "array of numbers",
                "—",
                "required",
                "step heights",
            ),
            k(
                "step.shape.steps.durations",
                "array of strings (expressions)",
                "time (s)",
                "required",
                "step lengths",
            ),
            k(
                "step.shape.table",
                "table",
                "—",
                "—",
                "linear interpolation of a table",
            ),
            k(
                "step.shape.table.times",
                "array of strings (expressions)",
                "time (s)",
                "required",
                "knot times from 0 to T",
            ),
            k(
                "step.shape.table.values",
                "array of numbers",
                "—",
                "required",
                "envelope values at the knots",
            ),
            k(
                "step.area",
                EXPR,
                "rad",
                "none",
                "pulse area ∫Ω dt; sets the amplitude",
            ),
            k(
                "step.scale",
                EXPR,
                "—",
                "\"1\"",
                "a factor on the light's amplitude",
            ),
            k(
                "step.phase",
                EXPR,
                "rad",
                "\"0\"",
                "an extra phase for this pulse",
            ),
            k(
                "step.at",
                EXPR,
                "time (s)",
                "after the previous step",
                "absolute start time (pulses may overlap)",
            ),
        ],
    },
    KindDef {
        kind: "evolve",
        naming: Naming::Required,
        keys: &[
            k(
                "atom",
                "string (block name)",
                "—",
                "the last atom above",
                "the atom to evolve",
            ),
            k(
                "sequence",
                "string (block name)",
                "—",
                "required unless steady",
                "the pulse sequence",
            ),
            k(
                "steady",
                "boolean",
                "—",
                "false",
                "compute the steady state under continuous light instead",
            ),
            k(
                "lights",
                "array of strings (light names)",
                "—",
                "every light of the atom",
                "the continuous lights of a steady state",
            ),
            k(
                "start",
                "string (level or group) or table",
                "—",
                "the first level",
                "the initial state; a group (`\"g\"`, `\"g2\"`) is an equal mixture of its sublevels",
            ),
            k(
                "start.mixture",
                "table",
                "—",
                "—",
                "an incoherent mixture: weights by level",
            ),
            k(
                "start.mixture.LEVEL",
                "number",
                "—",
                "—",
                "the weight of a level, or of a group spread evenly over its sublevels (normalised)",
            ),
            k(
                "start.superposition",
                "table",
                "—",
                "—",
                "a coherent superposition: real amplitudes by level",
            ),
            k(
                "start.superposition.LEVEL",
                "number",
                "—",
                "—",
                "the amplitude of a level (normalised)",
            ),
            k(
                "start.thermal",
                "table",
                "—",
                "—",
                "a Boltzmann mixture over some levels",
            ),
            k(
                "start.thermal.levels",
                "array of strings",
                "—",
                "required",
                "the levels (groups stand for their sublevels)",
            ),
            k(
                "start.thermal.temperature",
                EXPR,
                "temperature (K)",
                "required",
                "the temperature",
            ),
            k(
                "frame",
                "string: `rotating` or `exact`",
                "—",
                "\"rotating\"",
                "the frame of the amplitude equations",
            ),
            k(
                "cutoff",
                EXPR,
                ANG,
                "none (keep every co-rotating term)",
                "rotating frame: couplings left rotating faster than this are dropped",
            ),
            k(
                "method",
                "string: `auto`, `eigen`, `dp54`, `dop853`, `magnus4`, `liouvillian`",
                "—",
                "\"auto\"",
                "the propagation method",
            ),
            k(
                "rtol",
                "number",
                "—",
                "1e-8",
                "relative tolerance of adaptive methods",
            ),
            k(
                "atol",
                "number",
                "—",
                "1e-10",
                "absolute tolerance of adaptive methods",
            ),
            k(
                "max_steps",
                "integer",
                "—",
                "10000000",
                "step limit of adaptive methods, per run",
            ),
            k(
                "observe",
                "array of strings",
                "—",
                "required",
                "what to record: `population(L)`, `population(L1, L2)` (a sum; a group sums its sublevels), `coherence(L1, L2)`, `bloch(L1, L2)`, `fidelity(L)`, `scattering`, `norm`",
            ),
            k(
                "velocity",
                "array of three strings (expressions)",
                "velocity (m/s)",
                "at rest",
                "the atom's velocity in the lab frame: each light is Doppler shifted by −k·v (lights need a `direction`)",
            ),
            k(
                "samples",
                "integer",
                "—",
                "final only",
                "record at this many equally spaced times (no sweep)",
            ),
            k(
                "sweep",
                "table",
                "—",
                "none",
                "parameters to sweep over a grid, one table per axis",
            ),
            k(
                "sweep.PARAM",
                "table",
                "—",
                "—",
                "one axis: a parameter defined above",
            ),
            k(
                "sweep.PARAM.from",
                EXPR,
                "the parameter's",
                "required with `to`",
                "first value",
            ),
            k(
                "sweep.PARAM.to",
                EXPR,
                "the parameter's",
                "required with `from`",
                "last value",
            ),
            k(
                "sweep.PARAM.points",
                "integer",
                "—",
                "required with `from`",
                "number of points (≥ 1)",
            ),
            k(
                "sweep.PARAM.log",
                "boolean",
                "—",
                "false",
                "space the points logarithmically",
            ),
            k(
                "sweep.PARAM.values",
                "array of strings (expressions)",
                "the parameter's",
                "—",
                "explicit values instead of from/to/points",
            ),
            k(
                "average",
                "table",
                "—",
                "none",
                "average the results over a distribution of one parameter",
            ),
            k(
                "average.PARAM",
                "table",
                "—",
                "—",
                "the averaged parameter, centred on its value",
            ),
            k(
                "average.PARAM.sigma",
                EXPR,
                "the parameter's",
                "sigma or doppler",
                "rms width of a normal distribution",
            ),
            k(
                "average.PARAM.doppler",
                "table",
                "—",
                "sigma or doppler",
                "Doppler width σ = k √(k_B T / m) of a detuning",
            ),
            k(
                "average.PARAM.doppler.temperature",
                EXPR,
                "temperature (K)",
                "required",
                "gas temperature",
            ),
            k(
                "average.PARAM.doppler.mass",
                EXPR,
                "mass (kg)",
                "required",
                "atomic mass, e.g. \"87 amu\"",
            ),
            k(
                "average.PARAM.doppler.wavelength",
                EXPR,
                "length (m)",
                "required",
                "the light's wavelength (k = 2π/λ)",
            ),
            k(
                "average.PARAM.points",
                "integer",
                "—",
                "15",
                "quadrature nodes or Monte-Carlo draws",
            ),
            k(
                "average.PARAM.method",
                "string: `quadrature` or `monte-carlo`",
                "—",
                "\"quadrature\"",
                "Gauss–Hermite quadrature or seeded Monte Carlo",
            ),
            k(
                "average.PARAM.seed",
                "integer",
                "—",
                "1",
                "Monte-Carlo seed",
            ),
        ],
    },
    KindDef {
        kind: "plot",
        naming: Naming::Optional,
        keys: &[
            k(
                "x",
                "string (result path)",
                "—",
                "required",
                "the horizontal axis: a sweep axis or `NAME.time`",
            ),
            k(
                "y",
                "string or array of strings (result paths)",
                "—",
                "required",
                "curves over x, or the vertical axis of a heat map",
            ),
            k(
                "z",
                "string (result path)",
                "—",
                "none",
                "the colour of a heat map over a 2-D sweep",
            ),
            k("title", "string", "—", "none", "a title"),
            k("log_x", "boolean", "—", "false", "logarithmic x axis"),
            k("log_y", "boolean", "—", "false", "logarithmic y axis"),
            k(
                "xlabel",
                "string",
                "—",
                "the axis's name, e.g. `delta`",
                "what the horizontal axis shows, e.g. `\"detuning Δ\"`; the unit is added",
            ),
            k(
                "ylabel",
                "string",
                "—",
                "the quantity, when all curves show one",
                "what the vertical axis shows; the unit is added",
            ),
            k(
                "zlabel",
                "string",
                "—",
                "the quantity",
                "what a heat map's colour shows; the unit is added",
            ),
            k(
                "labels",
                "array of strings",
                "—",
                "the paths, shortened",
                "the curves' names in the legend, one per `y`",
            ),
        ],
    },
    KindDef {
        kind: "table",
        naming: Naming::Optional,
        keys: &[
            k(
                "columns",
                "array of strings (result paths)",
                "—",
                "required",
                "scalars (one row) or series of equal length",
            ),
            k("title", "string", "—", "none", "a title"),
        ],
    },
    KindDef {
        kind: "check",
        naming: Naming::Optional,
        keys: &[
            k(
                "PATH",
                "table",
                "—",
                "—",
                "a scalar result path and what it must satisfy",
            ),
            k(
                "PATH.near",
                EXPR,
                "the result's",
                "one of near, below, above",
                "expected value",
            ),
            k(
                "PATH.within",
                EXPR,
                "the result's",
                "with near: required unless rel",
                "absolute tolerance",
            ),
            k(
                "PATH.rel",
                "number",
                "—",
                "—",
                "relative tolerance (instead of within)",
            ),
            k("PATH.below", EXPR, "the result's", "—", "upper bound"),
            k("PATH.above", EXPR, "the result's", "—", "lower bound"),
        ],
    },
];

/// The definition of `kind`, if the format has it.
pub fn kind(kind: &str) -> Option<&'static KindDef> {
    KINDS.iter().find(|k| k.kind == kind)
}

/// A placeholder component is a word of capitals (`NAME`, `LEVEL`); single capitals (`J`, `A`)
/// are the quantum numbers and constants of the trade, written as physicists write them.
fn is_placeholder(component: &str) -> bool {
    component.len() > 1 && component.chars().all(|c| c.is_ascii_uppercase())
}

/// The key definitions directly below `prefix` (a dotted path of definition components).
fn children<'a>(def: &'a KindDef, prefix: &str) -> impl Iterator<Item = &'a KeyDef> + 'a {
    let prefix = prefix.to_string();
    def.keys
        .iter()
        .filter(move |k| match k.path.rsplit_once('.') {
            Some((parent, _)) => parent == prefix,
            None => prefix.is_empty(),
        })
}

/// Report every key of `table` (at definition path `prefix`) that the kind does not accept,
/// recursing into sub-tables and arrays of tables. Tables whose keys are placeholders accept any
/// key name.
pub fn check_keys(def: &KindDef, prefix: &str, table: &[(Key, Node)], diags: &mut Vec<Diagnostic>) {
    check_keys_at(def, prefix, prefix, table, diags);
}

/// [`check_keys`] with `shown`, the path as the user wrote it (`sweep.delta`), for messages.
fn check_keys_at(
    def: &KindDef,
    prefix: &str,
    shown: &str,
    table: &[(Key, Node)],
    diags: &mut Vec<Diagnostic>,
) {
    let allowed: Vec<&KeyDef> = children(def, prefix).collect();
    for (key, node) in table {
        let last = |k: &KeyDef| k.path.rsplit('.').next().unwrap_or(k.path);
        let hit = allowed
            .iter()
            .find(|k| last(k) == key.name)
            .or_else(|| allowed.iter().find(|k| is_placeholder(last(k))));
        let Some(hit) = hit else {
            let names: Vec<&str> = allowed.iter().map(|k| last(k)).collect();
            let where_ = if prefix.is_empty() {
                format!("{} `{}` block", article(def.kind), def.kind)
            } else {
                format!("`{shown}` of {} `{}` block", article(def.kind), def.kind)
            };
            let hint = match did_you_mean(&key.name, names.iter().copied()) {
                Some(s) => format!("did you mean `{s}`?"),
                None => format!("accepted here: {}", list(&names)),
            };
            diags.push(
                Diagnostic::error(
                    key.span.clone(),
                    format!("unknown key `{}` in {where_}", key.name),
                )
                .with_hint(hint),
            );
            continue;
        };
        match &node.value {
            Value::Table(sub) => check_keys_at(def, hit.path, &join(shown, &key.name), sub, diags),
            Value::Array(items) => {
                for item in items {
                    if let Value::Table(sub) = &item.value {
                        check_keys_at(def, hit.path, &join(shown, &key.name), sub, diags);
                    }
                }
            }
            _ => {}
        }
    }
}

fn join(prefix: &str, key: &str) -> String {
    if prefix.is_empty() {
        key.to_string()
    } else {
        format!("{prefix}.{key}")
    }
}

/// "a" or "an" before a block kind.
pub fn article(kind: &str) -> &'static str {
    if kind.starts_with(['a', 'e', 'i', 'o', 'u']) {
        "an"
    } else {
        "a"
    }
}

/// The keys of `table` that the kind does not accept at the top level.
pub fn unknown_top(def: &KindDef, table: &[(Key, Node)]) -> Vec<String> {
    let allowed: Vec<&str> = children(def, "").map(|k| k.path).collect();
    if allowed.iter().any(|k| is_placeholder(k)) {
        return vec![];
    }
    table
        .iter()
        .filter(|(k, _)| !allowed.contains(&k.name.as_str()))
        .map(|(k, _)| k.name.clone())
        .collect()
}

/// `a`, `b` and `c` — for hints.
pub fn list(names: &[&str]) -> String {
    let quoted: Vec<String> = names.iter().map(|n| format!("`{n}`")).collect();
    match quoted.len() {
        0 => "nothing".into(),
        1 => quoted[0].clone(),
        n => format!("{} and {}", quoted[..n - 1].join(", "), quoted[n - 1]),
    }
}

/// The key reference of SPEC.md §8: one table per kind.
pub fn reference_markdown() -> String {
    let mut out = String::new();
    for def in KINDS {
        let naming = match def.naming {
            Naming::Required => "NAME",
            Naming::Optional => "[NAME]",
        };
        out.push_str(&format!("\n### `{} {naming}`\n\n| key | type | unit | default | meaning |\n|---|---|---|---|---|\n", def.kind));
        for k in def.keys {
            out.push_str(&format!(
                "| `{}` | {} | {} | {} | {} |\n",
                k.path, k.ty, k.unit, k.default, k.doc
            ));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::super::tree;
    use super::*;

    /// SPEC.md documents exactly the keys the code accepts.
    #[test]
    fn spec_lists_every_key() {
        let path = concat!(env!("CARGO_MANIFEST_DIR"), "/notebooks-spec/SPEC.md");
        let spec = std::fs::read_to_string(path).expect("SPEC.md");
        let (begin, end) = ("<!-- keys:begin -->\n", "<!-- keys:end -->");
        let a = spec.find(begin).expect("keys:begin marker") + begin.len();
        let b = spec.find(end).expect("keys:end marker");
        let want = reference_markdown();
        if std::env::var_os("UPDATE_SPEC").is_some() {
            let new = format!("{}{want}{}", &spec[..a], &spec[b..]);
            std::fs::write(path, new).expect("write SPEC.md");
            return;
        }
        assert_eq!(
            spec[a..b],
            want,
            "SPEC.md's key reference is stale: run UPDATE_SPEC=1 cargo test -p fieldbook spec_lists_every_key"
        );
        // And every kind the parser knows is documented with a section of its own.
        for kind in super::super::markdown::KINDS {
            assert!(
                spec.contains(&format!("`{kind}")),
                "SPEC.md does not mention `{kind}`"
            );
        }
    }

    #[test]
    fn every_parent_path_is_defined() {
        for def in KINDS {
            for key in def.keys {
                if let Some((parent, _)) = key.path.rsplit_once('.') {
                    assert!(
                        def.keys.iter().any(|k| k.path == parent),
                        "{}: `{}` has no parent definition",
                        def.kind,
                        key.path
                    );
                }
            }
        }
    }

    #[test]
    fn unknown_keys_get_suggestions_at_every_depth() {
        let def = kind("evolve").unwrap();
        let body = "sequense = \"s\"\n[sweep.delta]\nfrom = \"0 Hz\"\npoints = 3\ntoo = 1\n";
        let (t, d) = tree::parse(body, 0);
        assert!(d.is_empty());
        let mut diags = Vec::new();
        check_keys(def, "", &t.unwrap(), &mut diags);
        assert_eq!(diags.len(), 2, "{diags:?}");
        assert_eq!(diags[0].hint.as_deref(), Some("did you mean `sequence`?"));
        assert!(diags[1].message.contains("`too`"));
        assert_eq!(diags[1].hint.as_deref(), Some("did you mean `to`?"));
    }
}
