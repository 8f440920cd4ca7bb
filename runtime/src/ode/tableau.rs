//! Butcher tableaux of the embedded Runge–Kutta pairs, stored as plain data.
//!
//! Each tableau is an *extended* explicit tableau: rows `0..stages` are the
//! main stages, row `stages` is the first-same-as-last (FSAL) stage whose
//! weights are `b` (so it evaluates `f(t + h, y_new)`), and any rows after
//! that are extra stages needed only by the dense output (DOP853 has three).
//!
//! The long decimal literals are kept digit for digit as published, so that
//! they can be compared against the sources by eye; f64 rounds them.
#![allow(clippy::excessive_precision)]

/// Largest number of stages (main + FSAL + dense-output extras) of any tableau.
pub const MAX_STAGES: usize = 16;

/// How the local error estimate is formed from the stage derivatives `k_i`.
#[derive(Debug, Clone, Copy)]
pub enum ErrorEstimate {
    /// `err = h Σ e_i k_i`, the difference between the propagated solution
    /// and an embedded solution of lower order (weights over `stages + 1`
    /// stages, the last being the FSAL stage).
    Embedded {
        /// Difference weights `e_i`.
        e: &'static [f64],
    },
    /// DOP853's blend of a 5th- and a 3rd-order difference,
    /// `‖err‖ = |h| ‖err5‖² / sqrt(‖err5‖² + 0.01 ‖err3‖²)`, which behaves
    /// like an 8th-order estimate while staying robust when `err5` happens to
    /// vanish (Hairer, Nørsett & Wanner, Solving ODEs I, 2nd ed., Sec. II.10).
    Blended {
        /// Weights of the 5th-order difference `err5 = Σ e5_i k_i`.
        e5: &'static [f64],
        /// Weights of the 3rd-order difference `err3 = Σ e3_i k_i`.
        e3: &'static [f64],
    },
}

impl ErrorEstimate {
    /// Whether the estimate needs the FSAL stage `f(t + h, y_new)` (index
    /// `stages`); if not, the integrator evaluates it only for accepted steps.
    pub fn uses_stage(&self, index: usize) -> bool {
        let weight = |w: &[f64]| w.get(index).is_some_and(|&x| x != 0.0);
        match *self {
            Self::Embedded { e } => weight(e),
            Self::Blended { e5, e3 } => weight(e5) || weight(e3),
        }
    }
}

/// The continuous extension used for dense output on a step `[t, t + h]`,
/// evaluated at `t + θh` with `θ ∈ [0, 1]`.
#[derive(Debug, Clone, Copy)]
pub enum DenseOutput {
    /// `y(t + θh) ≈ y + h Σ_i k_i Σ_j p_ij θ^(j+1)` over the `stages + 1`
    /// stages (no extra stages needed).
    Polynomial {
        /// Row `i` holds the coefficients of `θ, θ², θ³, θ⁴` for stage `i`.
        p: &'static [[f64; 4]],
    },
    /// DOP853's 7th-order interpolant in the nested form
    /// `θ(F0 + (1-θ)(F1 + θ(F2 + (1-θ)(F3 + θ(F4 + (1-θ)(F5 + θF6))))))`
    /// with `F0 = Δy`, `F1 = h k_0 − Δy`, `F2 = 2Δy − h(k_0 + k_new)` and
    /// `F(3+m) = h Σ_i d_mi k_i` over all 16 stages (three extra ones).
    Dop853 {
        /// Coefficients `d_mi` of `F3..F6`.
        d: &'static [[f64; MAX_STAGES]; 4],
    },
}

/// An embedded explicit Runge–Kutta pair with dense output, as data.
#[derive(Debug)]
pub struct Tableau {
    /// Human-readable name of the scheme.
    pub name: &'static str,
    /// Order of the propagated solution.
    pub order: u32,
    /// Order the error estimate behaves like; sets the step-size exponent
    /// `-1 / (error_order + 1)`.
    pub error_order: u32,
    /// Number of main stages `s`; the FSAL stage has index `s`.
    pub stages: usize,
    /// Nodes `c_i` of every stage (main, FSAL, dense extras).
    pub c: &'static [f64],
    /// Strictly lower-triangular coefficients: row `i` has length `i`.
    pub a: &'static [&'static [f64]],
    /// Weights of the propagated solution over the `s` main stages.
    pub b: &'static [f64],
    /// Local error estimator.
    pub error: ErrorEstimate,
    /// Continuous extension.
    pub dense: DenseOutput,
}

impl Tableau {
    /// Total number of stages including the FSAL stage and dense extras.
    pub fn total_stages(&self) -> usize {
        self.c.len()
    }

    /// Fills `w[..total_stages()]` with weights such that
    /// `y(t + θh) ≈ y + α (y_new − y) + h Σ_i w_i k_i`, and returns `α`.
    ///
    /// Writing the interpolant as stage weights lets the integrator evaluate
    /// it with the same sparse linear combination it uses for stages.
    pub fn dense_weights(&self, theta: f64, w: &mut [f64; MAX_STAGES]) -> f64 {
        w.fill(0.0);
        match self.dense {
            DenseOutput::Polynomial { p } => {
                for (wi, row) in w.iter_mut().zip(p) {
                    // Horner in θ for Σ_j p_j θ^(j+1).
                    *wi = theta * (row[0] + theta * (row[1] + theta * (row[2] + theta * row[3])));
                }
                0.0
            }
            DenseOutput::Dop853 { d } => {
                let (x, y) = (theta, 1.0 - theta);
                // Coefficients of F0..F6 obtained by expanding the nested form.
                let f = [
                    x,
                    x * y,
                    x * x * y,
                    x * x * y * y,
                    x * x * x * y * y,
                    x * x * x * y * y * y,
                    x * x * x * x * y * y * y,
                ];
                for (m, row) in d.iter().enumerate() {
                    for (wi, &dmi) in w.iter_mut().zip(row) {
                        *wi += f[3 + m] * dmi;
                    }
                }
                w[0] += f[1] - f[2];
                w[self.stages] -= f[2];
                f[0] - f[1] + 2.0 * f[2]
            }
        }
    }
}

/// Dormand–Prince 5(4) pair with FSAL (J. R. Dormand and P. J. Prince,
/// "A family of embedded Runge-Kutta formulae", J. Comput. Appl. Math. 6,
/// 19–26 (1980)); the dense output is the 4th-order continuous extension
/// with Shampine's optimal free parameter (L. F. Shampine, "Some practical
/// Runge-Kutta formulas", Math. Comp. 46, 135–150 (1986); Hairer, Nørsett &
/// Wanner, Solving ODEs I, 2nd ed., Sec. II.6). Values as in scipy's
/// `scipy/integrate/_ivp/rk.py` (class `RK45`).
pub fn dormand_prince_54() -> &'static Tableau {
    &DP54
}

/// Hairer & Wanner's DOP853: Dormand–Prince 8(5,3) with a 7th-order dense
/// output using three extra stages (Hairer, Nørsett & Wanner, Solving ODEs I,
/// 2nd ed., Sec. II.10, and the DOP853 Fortran code). Coefficients copied
/// verbatim from scipy's `scipy/integrate/_ivp/dop853_coefficients.py`.
pub fn dormand_prince_853() -> &'static Tableau {
    &DOP853
}

const DP54_B: [f64; 6] = [
    35.0 / 384.0,
    0.0,
    500.0 / 1113.0,
    125.0 / 192.0,
    -2187.0 / 6784.0,
    11.0 / 84.0,
];

static DP54: Tableau = Tableau {
    name: "Dormand-Prince 5(4)",
    order: 5,
    error_order: 4,
    stages: 6,
    c: &[0.0, 1.0 / 5.0, 3.0 / 10.0, 4.0 / 5.0, 8.0 / 9.0, 1.0, 1.0],
    a: &[
        &[],
        &[1.0 / 5.0],
        &[3.0 / 40.0, 9.0 / 40.0],
        &[44.0 / 45.0, -56.0 / 15.0, 32.0 / 9.0],
        &[
            19372.0 / 6561.0,
            -25360.0 / 2187.0,
            64448.0 / 6561.0,
            -212.0 / 729.0,
        ],
        &[
            9017.0 / 3168.0,
            -355.0 / 33.0,
            46732.0 / 5247.0,
            49.0 / 176.0,
            -5103.0 / 18656.0,
        ],
        // FSAL row: the weights b, so stage 6 is f(t + h, y_new).
        &DP54_B,
    ],
    b: &DP54_B,
    error: ErrorEstimate::Embedded {
        // b̂ − b with b̂ the 4th-order embedded weights.
        e: &[
            -71.0 / 57600.0,
            0.0,
            71.0 / 16695.0,
            -71.0 / 1920.0,
            17253.0 / 339200.0,
            -22.0 / 525.0,
            1.0 / 40.0,
        ],
    },
    dense: DenseOutput::Polynomial {
        p: &[
            [
                1.0,
                -8048581381.0 / 2820520608.0,
                8663915743.0 / 2820520608.0,
                -12715105075.0 / 11282082432.0,
            ],
            [0.0, 0.0, 0.0, 0.0],
            [
                0.0,
                131558114200.0 / 32700410799.0,
                -68118460800.0 / 10900136933.0,
                87487479700.0 / 32700410799.0,
            ],
            [
                0.0,
                -1754552775.0 / 470086768.0,
                14199869525.0 / 1410260304.0,
                -10690763975.0 / 1880347072.0,
            ],
            [
                0.0,
                127303824393.0 / 49829197408.0,
                -318862633887.0 / 49829197408.0,
                701980252875.0 / 199316789632.0,
            ],
            [
                0.0,
                -282668133.0 / 205662961.0,
                2019193451.0 / 616988883.0,
                -1453857185.0 / 822651844.0,
            ],
            [
                0.0,
                40617522.0 / 29380423.0,
                -110615467.0 / 29380423.0,
                69997945.0 / 29380423.0,
            ],
        ],
    },
};

static DOP853: Tableau = Tableau {
    name: "DOP853 (Dormand-Prince 8(5,3))",
    order: 8,
    error_order: 7,
    stages: 12,
    c: &DOP853_C,
    a: &DOP853_A,
    b: &DOP853_B,
    error: ErrorEstimate::Blended {
        e5: &DOP853_E5,
        e3: &DOP853_E3,
    },
    dense: DenseOutput::Dop853 { d: &DOP853_D },
};

// DOP853 nodes: 12 main stages, the FSAL stage (c = 1) and 3 dense extras.
const DOP853_C: [f64; 16] = [
    0.0,
    0.526001519587677318785587544488e-01,
    0.789002279381515978178381316732e-01,
    0.118350341907227396726757197510,
    0.281649658092772603273242802490,
    0.333333333333333333333333333333,
    0.25,
    0.307692307692307692307692307692,
    0.651282051282051282051282051282,
    0.6,
    0.857142857142857142857142857142,
    1.0,
    1.0,
    0.1,
    0.2,
    0.777777777777777777777777777778,
];

// DOP853 8th-order weights (row 12 of scipy's extended `A`).
const DOP853_B: [f64; 12] = [
    5.42937341165687622380535766363e-2,
    0.0,
    0.0,
    0.0,
    0.0,
    4.45031289275240888144113950566,
    1.89151789931450038304281599044,
    -5.8012039600105847814672114227,
    3.1116436695781989440891606237e-1,
    -1.52160949662516078556178806805e-1,
    2.01365400804030348374776537501e-1,
    4.47106157277725905176885569043e-2,
];

// DOP853 stage coefficients, rows 13..16 feeding only the dense output.
const DOP853_A: [&[f64]; 16] = [
    &[],
    &[5.26001519587677318785587544488e-2],
    &[
        1.97250569845378994544595329183e-2,
        5.91751709536136983633785987549e-2,
    ],
    &[
        2.95875854768068491816892993775e-2,
        0.0,
        8.87627564304205475450678981324e-2,
    ],
    &[
        2.41365134159266685502369798665e-1,
        0.0,
        -8.84549479328286085344864962717e-1,
        9.24834003261792003115737966543e-1,
    ],
    &[
        3.7037037037037037037037037037e-2,
        0.0,
        0.0,
        1.70828608729473871279604482173e-1,
        1.25467687566822425016691814123e-1,
    ],
    &[
        3.7109375e-2,
        0.0,
        0.0,
        1.70252211019544039314978060272e-1,
        6.02165389804559606850219397283e-2,
        -1.7578125e-2,
    ],
    &[
        3.70920001185047927108779319836e-2,
        0.0,
        0.0,
        1.70383925712239993810214054705e-1,
        1.07262030446373284651809199168e-1,
        -1.53194377486244017527936158236e-2,
        8.27378916381402288758473766002e-3,
    ],
    &[
        6.24110958716075717114429577812e-1,
        0.0,
        0.0,
        -3.36089262944694129406857109825,
        -8.68219346841726006818189891453e-1,
        2.75920996994467083049415600797e1,
        2.01540675504778934086186788979e1,
        -4.34898841810699588477366255144e1,
    ],
    &[
        4.77662536438264365890433908527e-1,
        0.0,
        0.0,
        -2.48811461997166764192642586468,
        -5.90290826836842996371446475743e-1,
        2.12300514481811942347288949897e1,
        1.52792336328824235832596922938e1,
        -3.32882109689848629194453265587e1,
        -2.03312017085086261358222928593e-2,
    ],
    &[
        -9.3714243008598732571704021658e-1,
        0.0,
        0.0,
        5.18637242884406370830023853209,
        1.09143734899672957818500254654,
        -8.14978701074692612513997267357,
        -1.85200656599969598641566180701e1,
        2.27394870993505042818970056734e1,
        2.49360555267965238987089396762,
        -3.0467644718982195003823669022,
    ],
    &[
        2.27331014751653820792359768449,
        0.0,
        0.0,
        -1.05344954667372501984066689879e1,
        -2.00087205822486249909675718444,
        -1.79589318631187989172765950534e1,
        2.79488845294199600508499808837e1,
        -2.85899827713502369474065508674,
        -8.87285693353062954433549289258,
        1.23605671757943030647266201528e1,
        6.43392746015763530355970484046e-1,
    ],
    // FSAL row: the weights b, so stage 12 is f(t + h, y_new).
    &DOP853_B,
    &[
        5.61675022830479523392909219681e-2,
        0.0,
        0.0,
        0.0,
        0.0,
        0.0,
        2.53500210216624811088794765333e-1,
        -2.46239037470802489917441475441e-1,
        -1.24191423263816360469010140626e-1,
        1.5329179827876569731206322685e-1,
        8.20105229563468988491666602057e-3,
        7.56789766054569976138603589584e-3,
        -8.298e-3,
    ],
    &[
        3.18346481635021405060768473261e-2,
        0.0,
        0.0,
        0.0,
        0.0,
        2.83009096723667755288322961402e-2,
        5.35419883074385676223797384372e-2,
        -5.49237485713909884646569340306e-2,
        0.0,
        0.0,
        -1.08347328697249322858509316994e-4,
        3.82571090835658412954920192323e-4,
        -3.40465008687404560802977114492e-4,
        1.41312443674632500278074618366e-1,
    ],
    &[
        -4.28896301583791923408573538692e-1,
        0.0,
        0.0,
        0.0,
        0.0,
        -4.69762141536116384314449447206,
        7.68342119606259904184240953878,
        4.06898981839711007970213554331,
        3.56727187455281109270669543021e-1,
        0.0,
        0.0,
        0.0,
        -1.39902416515901462129418009734e-3,
        2.9475147891527723389556272149,
        -9.15095847217987001081870187138,
    ],
];

// DOP853 dense-output coefficients of F3..F6 (scipy's `D`).
const DOP853_D: [[f64; 16]; 4] = [
    [
        -0.84289382761090128651353491142e+1,
        0.0,
        0.0,
        0.0,
        0.0,
        0.56671495351937776962531783590,
        -0.30689499459498916912797304727e+1,
        0.23846676565120698287728149680e+1,
        0.21170345824450282767155149946e+1,
        -0.87139158377797299206789907490,
        0.22404374302607882758541771650e+1,
        0.63157877876946881815570249290,
        -0.88990336451333310820698117400e-1,
        0.18148505520854727256656404962e+2,
        -0.91946323924783554000451984436e+1,
        -0.44360363875948939664310572000e+1,
    ],
    [
        0.10427508642579134603413151009e+2,
        0.0,
        0.0,
        0.0,
        0.0,
        0.24228349177525818288430175319e+3,
        0.16520045171727028198505394887e+3,
        -0.37454675472269020279518312152e+3,
        -0.22113666853125306036270938578e+2,
        0.77334326684722638389603898808e+1,
        -0.30674084731089398182061213626e+2,
        -0.93321305264302278729567221706e+1,
        0.15697238121770843886131091075e+2,
        -0.31139403219565177677282850411e+2,
        -0.93529243588444783865713862664e+1,
        0.35816841486394083752465898540e+2,
    ],
    [
        0.19985053242002433820987653617e+2,
        0.0,
        0.0,
        0.0,
        0.0,
        -0.38703730874935176555105901742e+3,
        -0.18917813819516756882830838328e+3,
        0.52780815920542364900561016686e+3,
        -0.11573902539959630126141871134e+2,
        0.68812326946963000169666922661e+1,
        -0.10006050966910838403183860980e+1,
        0.77771377980534432092869265740,
        -0.27782057523535084065932004339e+1,
        -0.60196695231264120758267380846e+2,
        0.84320405506677161018159903784e+2,
        0.11992291136182789328035130030e+2,
    ],
    [
        -0.25693933462703749003312586129e+2,
        0.0,
        0.0,
        0.0,
        0.0,
        -0.15418974869023643374053993627e+3,
        -0.23152937917604549567536039109e+3,
        0.35763911791061412378285349910e+3,
        0.93405324183624310003907691704e+2,
        -0.37458323136451633156875139351e+2,
        0.10409964950896230045147246184e+3,
        0.29840293426660503123344363579e+2,
        -0.43533456590011143754432175058e+2,
        0.96324553959188282948394950600e+2,
        -0.39177261675615439165231486172e+2,
        -0.14972683625798562581422125276e+3,
    ],
];

/// `b − b̂₃` with `b̂₃` the embedded 3rd-order weights (nonzero at 0, 8, 11).
const DOP853_E3: [f64; 13] = [
    DOP853_B[0] - 0.244094488188976377952755905512,
    DOP853_B[1],
    DOP853_B[2],
    DOP853_B[3],
    DOP853_B[4],
    DOP853_B[5],
    DOP853_B[6],
    DOP853_B[7],
    DOP853_B[8] - 0.733846688281611857341361741547,
    DOP853_B[9],
    DOP853_B[10],
    DOP853_B[11] - 0.220588235294117647058823529412e-1,
    0.0,
];

/// Difference between `b` and the embedded 5th-order weights.
const DOP853_E5: [f64; 13] = [
    0.1312004499419488073250102996e-1,
    0.0,
    0.0,
    0.0,
    0.0,
    -0.1225156446376204440720569753e+1,
    -0.4957589496572501915214079952,
    0.1664377182454986536961530415e+1,
    -0.3503288487499736816886487290,
    0.3341791187130174790297318841,
    0.8192320648511571246570742613e-1,
    -0.2235530786388629525884427845e-1,
    0.0,
];

#[cfg(test)]
mod tests {
    use super::*;

    /// A rooted tree: its order and its children as indices into the list of
    /// smaller trees (non-increasing, so each multiset appears once).
    struct Tree {
        order: usize,
        children: Vec<usize>,
    }

    /// All rooted trees up to `max_order`, ordered by order (Butcher, Numerical
    /// Methods for ODEs, 2008, Sec. 30: one order condition per tree).
    fn rooted_trees(max_order: usize) -> Vec<Tree> {
        fn children_sets(
            trees: &[Tree],
            max_idx: usize,
            remaining: usize,
            cur: &mut Vec<usize>,
            out: &mut Vec<Vec<usize>>,
        ) {
            if remaining == 0 {
                out.push(cur.clone());
                return;
            }
            for idx in 0..=max_idx {
                if trees[idx].order <= remaining {
                    cur.push(idx);
                    children_sets(trees, idx, remaining - trees[idx].order, cur, out);
                    cur.pop();
                }
            }
        }
        let mut trees = vec![Tree {
            order: 1,
            children: vec![],
        }];
        for order in 2..=max_order {
            let mut sets = Vec::new();
            children_sets(&trees, trees.len() - 1, order - 1, &mut vec![], &mut sets);
            trees.extend(sets.into_iter().map(|children| Tree { order, children }));
        }
        trees
    }

    /// Dense extended matrix A (all stages) from the row slices.
    fn full_a(tab: &Tableau) -> Vec<Vec<f64>> {
        let n = tab.total_stages();
        (0..n)
            .map(|i| {
                (0..n)
                    .map(|j| if j < i { tab.a[i][j] } else { 0.0 })
                    .collect()
            })
            .collect()
    }

    /// For every tree t: the stage vector Φ_i(t) and the density γ(t), so that
    /// a weight vector w has order p iff w·Φ(t) = 1/γ(t) for all |t| <= p.
    fn elementary_weights(tab: &Tableau, trees: &[Tree]) -> Vec<(Vec<f64>, f64)> {
        let a = full_a(tab);
        let n = tab.total_stages();
        let mut out: Vec<(Vec<f64>, f64)> = Vec::with_capacity(trees.len());
        for t in trees {
            let mut phi = vec![1.0; n];
            let mut gamma = t.order as f64;
            for &ch in &t.children {
                let (ref pc, gc) = out[ch];
                for (i, p) in phi.iter_mut().enumerate() {
                    *p *= (0..n).map(|j| a[i][j] * pc[j]).sum::<f64>();
                }
                gamma *= gc;
            }
            out.push((phi, gamma));
        }
        out
    }

    /// Largest violation of `w·Φ(t) = θ^|t| / γ(t)` over trees of order <= p.
    fn worst_residual(
        w: &[f64],
        theta: f64,
        p: usize,
        trees: &[Tree],
        ew: &[(Vec<f64>, f64)],
    ) -> f64 {
        trees
            .iter()
            .zip(ew)
            .filter(|(t, _)| t.order <= p)
            .map(|(t, (phi, gamma))| {
                let lhs: f64 = w.iter().zip(phi).map(|(a, b)| a * b).sum();
                (lhs - theta.powi(t.order as i32) / gamma).abs()
            })
            .fold(0.0, f64::max)
    }

    fn padded(w: &[f64], n: usize) -> Vec<f64> {
        let mut v = w.to_vec();
        v.resize(n, 0.0);
        v
    }

    #[test]
    fn tree_counts_match_oeis_a000081() {
        // Number of rooted trees with n nodes: OEIS A000081.
        let trees = rooted_trees(9);
        let counts: Vec<usize> = (1..=9)
            .map(|p| trees.iter().filter(|t| t.order == p).count())
            .collect();
        assert_eq!(counts, [1, 1, 2, 4, 9, 20, 48, 115, 286]);
    }

    #[test]
    fn check_order_conditions() {
        // Order 9 is included to show that the 8th-order method is not 9th.
        let trees = rooted_trees(9);
        for (tab, p, p_err, p_dense) in [
            (dormand_prince_54(), 5, 4, 4),
            (dormand_prince_853(), 8, 5, 7),
        ] {
            let n = tab.total_stages();
            assert_eq!(tab.a.len(), n, "{}", tab.name);
            // Consistency c_i = Σ_j a_ij for every row, including the extras.
            for (i, row) in tab.a.iter().enumerate() {
                assert_eq!(row.len(), i, "{}: row {i}", tab.name);
                let sum: f64 = row.iter().sum();
                assert!(
                    (sum - tab.c[i]).abs() < 1e-14,
                    "{}: row {i} sums to {sum}",
                    tab.name
                );
            }
            // The FSAL row carries the weights b and sits at c = 1.
            assert_eq!(tab.a[tab.stages], tab.b, "{}", tab.name);
            assert_eq!(tab.c[tab.stages], 1.0);

            // Quadrature conditions Σ b_i c_i^(k-1) = 1/k, k = 1..=p.
            for k in 1..=p {
                let q: f64 = tab
                    .b
                    .iter()
                    .zip(tab.c)
                    .map(|(b, c)| b * c.powi(k as i32 - 1))
                    .sum();
                assert!(
                    (q - 1.0 / k as f64).abs() < 1e-13,
                    "{}: quadrature k={k}: {q}",
                    tab.name
                );
            }

            let ew = elementary_weights(tab, &trees);
            let b = padded(tab.b, n);
            // Full order conditions of the propagated solution, and that order
            // p + 1 fails (so the test would notice a wrong `order`).
            let r = worst_residual(&b, 1.0, p, &trees, &ew);
            assert!(r < 1e-12, "{}: order {p} residual {r:e}", tab.name);
            assert!(
                worst_residual(&b, 1.0, p + 1, &trees, &ew) > 1e-6,
                "{}",
                tab.name
            );

            // Embedded solution: b̂ = b ± e has order p_err (DP5: e = b̂ − b;
            // DOP853: e5 = b − b̂₅, e3 = b − b̂₃ of order 3).
            match tab.error {
                ErrorEstimate::Embedded { e } => {
                    let bh: Vec<f64> = b.iter().zip(padded(e, n)).map(|(b, e)| b + e).collect();
                    let r = worst_residual(&bh, 1.0, p_err, &trees, &ew);
                    assert!(r < 1e-13, "{}: embedded residual {r:e}", tab.name);
                }
                ErrorEstimate::Blended { e5, e3 } => {
                    for (e, q) in [(e5, p_err), (e3, 3)] {
                        let bh: Vec<f64> = b.iter().zip(padded(e, n)).map(|(b, e)| b - e).collect();
                        let r = worst_residual(&bh, 1.0, q, &trees, &ew);
                        assert!(r < 1e-12, "{}: embedded order {q} residual {r:e}", tab.name);
                    }
                }
            }

            // Continuous extension: effective weights α b + w(θ) must satisfy
            // w(θ)·Φ(t) = θ^|t| / γ(t) up to the dense order, and reproduce b at θ = 1.
            for theta in [0.0, 0.13, 0.5, 0.77, 1.0] {
                let mut w = [0.0; MAX_STAGES];
                let alpha = tab.dense_weights(theta, &mut w);
                let eff: Vec<f64> = (0..n).map(|i| w[i] + alpha * b[i]).collect();
                let r = worst_residual(&eff, theta, p_dense, &trees, &ew);
                assert!(r < 1e-11, "{}: dense θ={theta} residual {r:e}", tab.name);
            }
            let mut w = [0.0; MAX_STAGES];
            let alpha = tab.dense_weights(1.0, &mut w);
            for i in 0..n {
                assert!(
                    (w[i] + alpha * b[i] - b[i]).abs() < 1e-12,
                    "{}: θ=1 stage {i}",
                    tab.name
                );
            }
        }
    }
}
