//! Result paths: how `plot`, `table`, `check` blocks and inline values name a computed result,
//! e.g. `transfer.final.population(e) at delta = 0` or `argmax(scan.final.population(e))`.

use super::source::Span;

/// An observable as written in `observe` and in result paths.
#[derive(Clone, Debug, PartialEq, Eq, Hash)]
pub enum ObsSpec {
    /// `population(L)` or the sum `population(L1, L2, …)`.
    Population(Vec<String>),
    /// `coherence(L1, L2)`: ρ_{L1 L2}, components `re`, `im`, `abs`.
    Coherence(String, String),
    /// `bloch(LOWER, UPPER)`: components `u`, `v`, `w`.
    Bloch(String, String),
    /// `fidelity(L)`: overlap with the level L.
    Fidelity(String),
    /// `scattering`: photon scattering rate (1/s).
    Scattering,
    /// `norm`: norm or trace of the state.
    Norm,
}

impl ObsSpec {
    /// Canonical text, e.g. `population(g, r)`.
    pub fn canonical(&self) -> String {
        match self {
            ObsSpec::Population(ls) => format!("population({})", ls.join(", ")),
            ObsSpec::Coherence(a, b) => format!("coherence({a}, {b})"),
            ObsSpec::Bloch(a, b) => format!("bloch({a}, {b})"),
            ObsSpec::Fidelity(l) => format!("fidelity({l})"),
            ObsSpec::Scattering => "scattering".into(),
            ObsSpec::Norm => "norm".into(),
        }
    }

    /// Names of the real components, empty for one-component observables.
    pub fn components(&self) -> &'static [&'static str] {
        match self {
            ObsSpec::Coherence(..) => &["re", "im", "abs"],
            ObsSpec::Bloch(..) => &["u", "v", "w"],
            _ => &[],
        }
    }

    /// Level names it mentions, for checking against the atom.
    pub fn levels(&self) -> Vec<&str> {
        match self {
            ObsSpec::Population(ls) => ls.iter().map(String::as_str).collect(),
            ObsSpec::Coherence(a, b) | ObsSpec::Bloch(a, b) => vec![a, b],
            ObsSpec::Fidelity(l) => vec![l],
            ObsSpec::Scattering | ObsSpec::Norm => vec![],
        }
    }
}

/// A problem in a path or observable, at a byte range of the string.
#[derive(Clone, Debug, PartialEq)]
pub struct PathError {
    /// Where in the string.
    pub span: Span,
    /// What is wrong.
    pub message: String,
    /// How to fix it.
    pub hint: Option<String>,
}

fn err(span: Span, message: impl Into<String>, hint: &str) -> PathError {
    PathError {
        span,
        message: message.into(),
        hint: (!hint.is_empty()).then(|| hint.to_string()),
    }
}

/// Parse an observable such as `population(g, r)` or `bloch(g, e)`.
pub fn parse_observable(s: &str) -> Result<ObsSpec, PathError> {
    let t = s.trim();
    let lead = s.len() - s.trim_start().len();
    let (head, args) = match t.find('(') {
        Some(open) => {
            if !t.ends_with(')') {
                return Err(err(
                    lead + open..s.len(),
                    "unclosed `(`",
                    "close the argument list with `)`",
                ));
            }
            let inner = &t[open + 1..t.len() - 1];
            let args: Vec<String> = inner.split(',').map(|a| a.trim().to_string()).collect();
            (&t[..open], Some((args, lead + open)))
        }
        None => (t, None),
    };
    let head = head.trim();
    let whole = lead..lead + t.len();
    let names = |n: usize, what: &str| -> Result<Vec<String>, PathError> {
        let (args, _) = args.clone().unwrap_or_default();
        if args.iter().any(String::is_empty) || (n > 0 && args.len() != n) {
            return Err(err(whole.clone(), format!("`{head}` takes {what}"), ""));
        }
        Ok(args)
    };
    match head {
        "population" => {
            let a = names(0, "one or more level names")?;
            if a.is_empty() {
                return Err(err(
                    whole,
                    "`population` takes one or more level names",
                    "e.g. `population(e)`",
                ));
            }
            Ok(ObsSpec::Population(a))
        }
        "coherence" => {
            let a = names(2, "two level names")?;
            Ok(ObsSpec::Coherence(a[0].clone(), a[1].clone()))
        }
        "bloch" => {
            let a = names(2, "two level names (lower, upper)")?;
            Ok(ObsSpec::Bloch(a[0].clone(), a[1].clone()))
        }
        "fidelity" => {
            let a = names(1, "one level name")?;
            Ok(ObsSpec::Fidelity(a[0].clone()))
        }
        "scattering" | "norm" if args.is_none() => Ok(if head == "norm" {
            ObsSpec::Norm
        } else {
            ObsSpec::Scattering
        }),
        _ => Err(err(
            lead..lead + head.len().max(1),
            format!("unknown observable `{head}`"),
            "observables are `population(L)`, `population(L1, L2)`, `coherence(L1, L2)`, `bloch(L1, L2)`, `fidelity(L)`, `scattering` and `norm`",
        )),
    }
}

/// A reduction applied to a one-dimensional series.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Reduce {
    /// Largest value.
    Max,
    /// Smallest value.
    Min,
    /// Axis coordinate of the largest value (parabolic refinement around the peak).
    ArgMax,
    /// Axis coordinate of the smallest value (parabolic refinement).
    ArgMin,
}

/// What a path names inside an `evolve` block's results.
#[derive(Clone, Debug, PartialEq)]
pub enum Target {
    /// `NAME.final.OBS[.COMP]`: values at the end (or the steady state), per sweep point.
    Final(ObsSpec, Option<String>),
    /// `NAME.trace.OBS[.COMP]`: values at the sample times.
    Trace(ObsSpec, Option<String>),
    /// `NAME.time`: the sample times.
    Time,
    /// `NAME.AXIS`: the values of a sweep axis.
    Axis(String),
}

/// A parsed result path.
#[derive(Clone, Debug, PartialEq)]
pub struct ResultPath {
    /// The `evolve` block named.
    pub block: String,
    /// Its span in the string.
    pub block_span: Span,
    /// What inside it.
    pub target: Target,
    /// Span of the target part.
    pub target_span: Span,
    /// An optional reduction.
    pub reduce: Option<Reduce>,
    /// `at AXIS = EXPR` selections: axis name, its span, the expression text and its span.
    pub at: Vec<(String, Span, String, Span)>,
}

impl ResultPath {
    /// A short name for legends and axes: the observable or axis without the block and `final`
    /// or `trace`, with its reduction and selections as written, e.g. `population(g2)` or
    /// `population(e) at bias = 0.5 G`; `with_block` puts `BLOCK: ` in front.
    pub fn short_name(&self, with_block: bool) -> String {
        let core = match &self.target {
            Target::Final(o, c) | Target::Trace(o, c) => match c {
                Some(c) => format!("{}.{c}", o.canonical()),
                None => o.canonical(),
            },
            Target::Time => "time".into(),
            Target::Axis(a) => a.clone(),
        };
        let mut out = match self.reduce {
            Some(r) => {
                let word = match r {
                    Reduce::Max => "max",
                    Reduce::Min => "min",
                    Reduce::ArgMax => "argmax",
                    Reduce::ArgMin => "argmin",
                };
                format!("{word}({core})")
            }
            None => core,
        };
        for (k, (axis, _, value, _)) in self.at.iter().enumerate() {
            out.push_str(if k == 0 { " at " } else { ", " });
            out.push_str(&format!("{axis} = {value}"));
        }
        if with_block {
            format!("{}: {out}", self.block)
        } else {
            out
        }
    }

    /// The quantity a path shows, without levels or selections: `population`, `coherence.re`,
    /// `scattering`, `time`, an axis name.
    pub fn quantity(&self) -> String {
        match &self.target {
            Target::Final(o, c) | Target::Trace(o, c) => {
                let head = o.canonical();
                let head = head.split('(').next().unwrap_or("").to_string();
                match c {
                    Some(c) => format!("{head}.{c}"),
                    None => head,
                }
            }
            Target::Time => "time".into(),
            Target::Axis(a) => a.clone(),
        }
    }
}

/// Parse a result path.
pub fn parse_path(s: &str) -> Result<ResultPath, PathError> {
    let (main, at_part) = match find_word(s, "at") {
        Some(i) => (&s[..i], Some(i + 2)),
        None => (s, None),
    };
    let mut at = Vec::new();
    if let Some(from) = at_part {
        let mut pos = from;
        for sel in split_top(&s[from..]) {
            let Some(eq) = sel.find('=') else {
                return Err(err(
                    pos..pos + sel.len(),
                    "expected `AXIS = VALUE` after `at`",
                    "e.g. `at delta = 0 Hz`",
                ));
            };
            let name = sel[..eq].trim();
            let name_at = pos + sel[..eq].find(name).unwrap_or(0);
            let value = sel[eq + 1..].trim();
            let value_at = pos + eq + 1 + sel[eq + 1..].find(value).unwrap_or(0);
            if name.is_empty() || value.is_empty() {
                return Err(err(
                    pos..pos + sel.len(),
                    "expected `AXIS = VALUE` after `at`",
                    "e.g. `at delta = 0 Hz`",
                ));
            }
            at.push((
                name.to_string(),
                name_at..name_at + name.len(),
                value.to_string(),
                value_at..value_at + value.len(),
            ));
            pos += sel.len() + 1;
        }
    }
    let lead = main.len() - main.trim_start().len();
    let mut body = main.trim();
    let mut off = lead;
    let mut reduce = None;
    for (word, r) in [
        ("argmax", Reduce::ArgMax),
        ("argmin", Reduce::ArgMin),
        ("max", Reduce::Max),
        ("min", Reduce::Min),
    ] {
        if let Some(rest) = body.strip_prefix(word)
            && rest.trim_start().starts_with('(')
        {
            let rest_t = rest.trim_start();
            if !rest_t.trim_end().ends_with(')') {
                return Err(err(
                    off..off + body.len(),
                    format!("unclosed `{word}(`"),
                    "close it with `)`",
                ));
            }
            off += word.len() + (rest.len() - rest_t.len()) + 1;
            body = rest_t[1..].trim_end();
            body = &body[..body.len() - 1];
            reduce = Some(r);
            break;
        }
    }
    let Some(dot) = body.find('.') else {
        return Err(err(
            off..off + body.len().max(1),
            format!("`{body}` is not a result path"),
            "paths look like `NAME.final.population(e)`, `NAME.trace.population(e)`, `NAME.time` or `NAME.AXIS`",
        ));
    };
    let block = body[..dot].trim();
    let block_span = off..off + dot;
    let rest = &body[dot + 1..];
    let rest_at = off + dot + 1;
    let target_span = rest_at..rest_at + rest.len();
    let obs_part = |r: &str, at0: usize| -> Result<(ObsSpec, Option<String>), PathError> {
        // A trailing `.re`/`.u`… selects a component; observables contain no dots otherwise.
        let (obs_text, comp) = match r.rfind('.') {
            Some(i) if r.rfind(')').is_none_or(|p| p < i) || !r.contains('(') => {
                (&r[..i], Some(r[i + 1..].trim().to_string()))
            }
            _ => (r, None),
        };
        let obs = parse_observable(obs_text).map_err(|mut e| {
            e.span = at0 + e.span.start..at0 + e.span.end;
            e
        })?;
        if let Some(c) = &comp {
            if !obs.components().contains(&c.as_str()) {
                let hint = if obs.components().is_empty() {
                    format!("`{}` has a single value; drop `.{c}`", obs.canonical())
                } else {
                    format!(
                        "components of `{}`: {}",
                        obs.canonical(),
                        obs.components().join(", ")
                    )
                };
                return Err(PathError {
                    span: at0..at0 + r.len(),
                    message: format!("`{c}` is not a component of `{}`", obs.canonical()),
                    hint: Some(hint),
                });
            }
        } else if !obs.components().is_empty() {
            return Err(PathError {
                span: at0..at0 + r.len(),
                message: format!("`{}` has several components; name one", obs.canonical()),
                hint: Some(format!(
                    "append one of: {}",
                    obs.components()
                        .iter()
                        .map(|c| format!(".{c}"))
                        .collect::<Vec<_>>()
                        .join(", ")
                )),
            });
        }
        Ok((obs, comp))
    };
    let target = if let Some(r) = rest.strip_prefix("final.") {
        let (o, c) = obs_part(r, rest_at + 6)?;
        Target::Final(o, c)
    } else if let Some(r) = rest.strip_prefix("trace.") {
        let (o, c) = obs_part(r, rest_at + 6)?;
        Target::Trace(o, c)
    } else if rest.trim() == "time" {
        Target::Time
    } else if super::markdown::is_name(rest.trim()) {
        Target::Axis(rest.trim().to_string())
    } else {
        return Err(err(
            target_span,
            format!("`{rest}` is not a result of a block"),
            "after the block name comes `final.OBS`, `trace.OBS`, `time` or a sweep axis",
        ));
    };
    Ok(ResultPath {
        block: block.to_string(),
        block_span,
        target,
        target_span,
        reduce,
        at,
    })
}

/// Split at commas outside parentheses, so that `at a = min(x, y), b = 2` has two selections.
fn split_top(s: &str) -> Vec<&str> {
    let (mut depth, mut start, mut out) = (0i32, 0, Vec::new());
    for (i, c) in s.char_indices() {
        match c {
            '(' => depth += 1,
            ')' => depth -= 1,
            ',' if depth == 0 => {
                out.push(&s[start..i]);
                start = i + 1;
            }
            _ => {}
        }
    }
    out.push(&s[start..]);
    out
}

/// Byte offset of `word` standing alone (surrounded by spaces) in `s`.
fn find_word(s: &str, word: &str) -> Option<usize> {
    let pat = format!(" {word} ");
    s.find(&pat).map(|i| i + 1)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn observables_parse_and_normalise() {
        assert_eq!(
            parse_observable("population(e)").unwrap(),
            ObsSpec::Population(vec!["e".into()])
        );
        assert_eq!(
            parse_observable(" population( g ,r )").unwrap().canonical(),
            "population(g, r)"
        );
        assert_eq!(
            parse_observable("bloch(g, e)").unwrap(),
            ObsSpec::Bloch("g".into(), "e".into())
        );
        assert_eq!(parse_observable("scattering").unwrap(), ObsSpec::Scattering);
        assert!(parse_observable("coherence(g)").is_err());
        let e = parse_observable("populaton(e)").unwrap_err();
        assert_eq!(e.span, 0..9);
    }

    #[test]
    fn paths_with_reductions_components_and_selections() {
        let p = parse_path("transfer.final.population(e) at delta = 0 Hz").unwrap();
        assert_eq!(p.block, "transfer");
        assert_eq!(
            p.target,
            Target::Final(ObsSpec::Population(vec!["e".into()]), None)
        );
        assert_eq!(p.at[0].0, "delta");
        assert_eq!(p.at[0].2, "0 Hz");
        let s = "transfer.final.population(e) at delta = 0 Hz";
        assert_eq!(&s[p.at[0].3.clone()], "0 Hz");
        let p = parse_path("argmax(scan.final.population(e))").unwrap();
        assert_eq!(p.reduce, Some(Reduce::ArgMax));
        assert_eq!(
            &"argmax(scan.final.population(e))"[p.block_span.clone()],
            "scan"
        );
        let p = parse_path("r.trace.bloch(g, e).w").unwrap();
        assert_eq!(
            p.target,
            Target::Trace(ObsSpec::Bloch("g".into(), "e".into()), Some("w".into()))
        );
        assert_eq!(
            parse_path("r.delta").unwrap().target,
            Target::Axis("delta".into())
        );
        assert_eq!(parse_path("r.time").unwrap().target, Target::Time);
        assert!(
            parse_path("r.final.bloch(g, e)")
                .unwrap_err()
                .message
                .contains("several components")
        );
        assert!(parse_path("r.final.population(e).w").is_err());
        assert!(parse_path("nonsense").is_err());
        let p = parse_path("r.final.norm at a = min(1 s, 2 s), b = 3").unwrap();
        assert_eq!(
            (p.at[0].2.as_str(), p.at[1].2.as_str()),
            ("min(1 s, 2 s)", "3")
        );
        assert!(parse_path("r.final.population(e) at delta").is_err());
    }
}
