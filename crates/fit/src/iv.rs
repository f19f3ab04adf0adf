//! Two-stage least squares from the moments of one Gram pass over `[W, Z, T, Y]`, and its
//! robust covariance, over-identification tests and Wald-ratio variance from the residual
//! moments of one score pass.
//!
//! Everything is solved in the pass's centred, scaled coordinates `v` with an intercept
//! column: `X = (1, W, T)` are the regressors, `Z̃ = (1, W, Z)` the instruments (covariates
//! instrument themselves). With `S_ab` the sums of products of the columns `a`, `b`:
//! `Π = S_ZZ⁻¹ S_ZX`, `A = S_XZ Π` (= X'P_Z X), `c = A⁻¹ Πᵀ S_Zy`.

use crate::{ols, FitError, Moments};
use nalgebra::{DMatrix, DVector};

/// Which columns of the moments play which part.
#[derive(Clone, Debug)]
pub struct IvColumns {
    /// Covariates (exogenous regressors).
    pub w: Vec<usize>,
    /// Excluded instruments.
    pub z: Vec<usize>,
    /// The (endogenous) treatment.
    pub t: usize,
    /// The outcome.
    pub y: usize,
}

/// The first stage: the treatment on the covariates and the instruments.
#[derive(Clone, Debug, PartialEq)]
pub struct FirstStage {
    /// Coefficients of the excluded instruments (original units), in order of `IvColumns::z`.
    pub coef: Vec<f64>,
    /// Their classical standard errors.
    pub std_error: Vec<f64>,
    /// F statistic of the excluded instruments (classical: restricted vs unrestricted RSS).
    pub partial_f: f64,
    /// Its degrees of freedom (instruments, rows minus first-stage parameters).
    pub df: (f64, f64),
}

/// An over-identification test statistic, χ² with `df` degrees of freedom under the null
/// that every instrument is valid.
#[derive(Clone, Debug, PartialEq)]
pub struct OverId {
    /// The statistic.
    pub stat: f64,
    /// Degrees of freedom: instruments minus treatments.
    pub df: usize,
    /// Upper-tail probability.
    pub p_value: f64,
}

/// A two-stage least squares fit.
#[derive(Clone, Debug)]
pub struct TwoStage {
    /// The treatment's coefficient (original units): the estimate.
    pub effect: f64,
    /// Its classical standard error (σ² = u'u / (n − k)).
    pub classical_se: f64,
    /// Coefficients on `(1, v_W, v_Z, v_T)` — zero for the excluded instruments — for a
    /// residual pass that computes `e = y − (d_0 + Σ d_i v_i)` over the terms `[W, Z, T]`.
    pub design: Vec<f64>,
    /// The first stage.
    pub first_stage: FirstStage,
    /// Sargan's statistic (classical errors), with more instruments than treatments.
    pub sargan: Option<OverId>,
    /// Rows.
    pub n: f64,
    /// Regressors, intercept included.
    pub k: usize,
    cols: IvColumns,
    a_inv: DMatrix<f64>,
    pi: DMatrix<f64>,
    szx: DMatrix<f64>,
    szy: DVector<f64>,
    scale_t: f64,
    scale_y: f64,
    centre_z: f64,
    scale_z: f64,
}

/// What the score pass adds: robust errors and Hansen's J.
#[derive(Clone, Debug, PartialEq)]
pub struct Robust {
    /// HC1 standard error of the effect (White's sandwich for 2SLS, n / (n − k)).
    pub se: f64,
    /// Hansen's J of the two-step efficient GMM estimate (weights from the 2SLS residuals),
    /// with more instruments than treatments.
    pub hansen_j: Option<OverId>,
}

/// The augmented sums `[[n, Σvᵀ], [Σv, Σvvᵀ]]` over `(1, v)`; index 0 is the intercept.
fn augmented(m: &Moments) -> DMatrix<f64> {
    let k = m.names.len();
    let mut h = DMatrix::zeros(k + 1, k + 1);
    h[(0, 0)] = m.n;
    for i in 0..k {
        h[(0, i + 1)] = m.sum[i];
        h[(i + 1, 0)] = m.sum[i];
        for j in 0..k {
            h[(i + 1, j + 1)] = m.gram[(i, j)];
        }
    }
    h
}

fn block(h: &DMatrix<f64>, rows: &[usize], cols: &[usize]) -> DMatrix<f64> {
    DMatrix::from_fn(rows.len(), cols.len(), |i, j| h[(rows[i], cols[j])])
}

fn inverse(m: DMatrix<f64>, what: impl Fn() -> FitError) -> Result<DMatrix<f64>, FitError> {
    m.cholesky().map(|c| c.inverse()).ok_or_else(what)
}

/// The upper tail of the χ² distribution with `df` degrees of freedom at `x`: the regularized
/// upper incomplete gamma function Q(df/2, x/2), by its series below a + 1 and its continued
/// fraction above (the classical pair of expansions; Abramowitz & Stegun 6.5.29 and 6.5.31).
pub fn chi2_upper(x: f64, df: usize) -> f64 {
    if x.is_nan() || x <= 0.0 {
        return 1.0;
    }
    let a = df as f64 / 2.0;
    let x = x / 2.0;
    let ln_front = a * x.ln() - x - ln_gamma(a);
    if x < a + 1.0 {
        let (mut sum, mut term, mut ap) = (1.0 / a, 1.0 / a, a);
        for _ in 0..1000 {
            ap += 1.0;
            term *= x / ap;
            sum += term;
            if term.abs() < sum.abs() * 1e-16 {
                break;
            }
        }
        (1.0 - sum * ln_front.exp()).clamp(0.0, 1.0)
    } else {
        // Lentz's method for the continued fraction.
        let tiny = 1e-300;
        let mut b = x + 1.0 - a;
        let mut c = 1.0 / tiny;
        let mut d = 1.0 / b;
        let mut h = d;
        for i in 1..1000 {
            let an = -(i as f64) * (i as f64 - a);
            b += 2.0;
            d = an * d + b;
            if d.abs() < tiny {
                d = tiny;
            }
            c = b + an / c;
            if c.abs() < tiny {
                c = tiny;
            }
            d = 1.0 / d;
            let delta = d * c;
            h *= delta;
            if (delta - 1.0).abs() < 1e-16 {
                break;
            }
        }
        (ln_front.exp() * h).clamp(0.0, 1.0)
    }
}

/// ln Γ(a) for a > 0 (Lanczos, g = 7, n = 9 coefficients).
fn ln_gamma(a: f64) -> f64 {
    const G: [f64; 9] = [
        0.999_999_999_999_809_9,
        676.520_368_121_885_1,
        -1_259.139_216_722_402_8,
        771.323_428_777_653_1,
        -176.615_029_162_140_6,
        12.507_343_278_686_905,
        -0.138_571_095_265_720_12,
        9.984_369_578_019_572e-6,
        1.505_632_735_149_311_6e-7,
    ];
    if a < 0.5 {
        let pi = std::f64::consts::PI;
        return (pi / (pi * a).sin()).ln() - ln_gamma(1.0 - a);
    }
    let a = a - 1.0;
    let mut s = G[0];
    for (i, g) in G.iter().enumerate().skip(1) {
        s += g / (a + i as f64);
    }
    let t = a + 7.5;
    0.5 * (2.0 * std::f64::consts::PI).ln() + (a + 0.5) * t.ln() - t + s.ln()
}

/// Two-stage least squares of `y` on `(1, W, T)` with instruments `(1, W, Z)`.
pub fn two_stage(m: &Moments, c: &IvColumns) -> Result<TwoStage, FitError> {
    let kw = c.w.len();
    let q = c.z.len();
    let k = kw + 2;
    let kz = kw + q + 1;
    if m.n <= kz.max(k) as f64 {
        return Err(FitError::TooFewRows {
            n: m.n,
            p: kz.max(k),
        });
    }
    // First stage (and its collinearity check, which names columns).
    let mut wz = c.w.clone();
    wz.extend(&c.z);
    let unrestricted = ols(m, c.t, &wz)?;
    let restricted = ols(m, c.t, &c.w)?;
    let df2 = m.n - kz as f64;
    let partial_f =
        ((restricted.rss - unrestricted.rss).max(0.0) / q as f64) / (unrestricted.rss / df2);
    let first_stage = FirstStage {
        coef: unrestricted.coef[kw..].to_vec(),
        std_error: unrestricted.std_error[1 + kw..].to_vec(),
        partial_f,
        df: (q as f64, df2),
    };
    let h = augmented(m);
    let zi: Vec<usize> = std::iter::once(0).chain(wz.iter().map(|i| i + 1)).collect();
    let xi: Vec<usize> = std::iter::once(0)
        .chain(c.w.iter().map(|i| i + 1))
        .chain(std::iter::once(c.t + 1))
        .collect();
    let szz = block(&h, &zi, &zi);
    let szx = block(&h, &zi, &xi);
    let sxx = block(&h, &xi, &xi);
    let szy = DVector::from_fn(kz, |i, _| h[(zi[i], c.y + 1)]);
    let sxy = DVector::from_fn(k, |i, _| h[(xi[i], c.y + 1)]);
    let syy = h[(c.y + 1, c.y + 1)];
    let names =
        |idx: &[usize]| -> Vec<String> { idx.iter().map(|&i| m.names[i].clone()).collect() };
    let szz_inv = inverse(szz, || FitError::Collinear {
        columns: names(&wz),
        condition: f64::INFINITY,
    })?;
    let pi = &szz_inv * &szx;
    let a = szx.transpose() * &pi;
    let a_inv = inverse(a, || FitError::Collinear {
        columns: names(&[c.t]),
        condition: f64::INFINITY,
    })?;
    let coef = &a_inv * (pi.transpose() * &szy);
    let uu = (syy - 2.0 * coef.dot(&sxy) + (coef.transpose() * &sxx * &coef)[0]).max(0.0);
    let sigma2 = uu / (m.n - k as f64);
    let (sy, st) = (m.scale[c.y], m.scale[c.t]);
    let effect = coef[k - 1] * sy / st;
    let classical_se = (sigma2 * a_inv[(k - 1, k - 1)]).max(0.0).sqrt() * sy / st;
    // Design coefficients over (1, v_W, v_Z, v_T), in the outcome's original units.
    let mut design = vec![m.centre[c.y] + sy * coef[0]];
    design.extend((0..kw).map(|i| sy * coef[1 + i]));
    design.extend(std::iter::repeat_n(0.0, q));
    design.push(sy * coef[k - 1]);
    let sargan = (q > 1).then(|| {
        let zu = &szy - &szx * &coef;
        let stat = (zu.transpose() * &szz_inv * &zu)[0] / (uu / m.n);
        OverId {
            stat,
            df: q - 1,
            p_value: chi2_upper(stat, q - 1),
        }
    });
    let (centre_z, scale_z) = match c.z.as_slice() {
        [z] => (m.centre[*z], m.scale[*z]),
        _ => (0.0, 1.0),
    };
    Ok(TwoStage {
        effect,
        classical_se,
        design,
        first_stage,
        sargan,
        n: m.n,
        k,
        cols: c.clone(),
        a_inv,
        pi,
        szx,
        szy,
        scale_t: st,
        scale_y: sy,
        centre_z,
        scale_z,
    })
}

impl TwoStage {
    /// Positions of the instruments `(1, W, Z)` in the score pass's `(1, v_W, v_Z, v_T)`.
    fn instrument_positions(&self) -> Vec<usize> {
        (0..1 + self.cols.w.len() + self.cols.z.len()).collect()
    }

    /// Robust errors and Hansen's J from `meat = Σ e² w wᵀ` over `w = (1, v_W, v_Z, v_T)`, the
    /// score pass's residual moments for the design coefficients [`TwoStage::design`].
    pub fn robust(&self, meat: &DMatrix<f64>) -> Result<Robust, FitError> {
        let p = self.design.len();
        if meat.nrows() != p || meat.ncols() != p {
            return Err(FitError::Shape(format!(
                "residual moments are {}x{}, expected {p}x{p}",
                meat.nrows(),
                meat.ncols()
            )));
        }
        let zi = self.instrument_positions();
        let mz = block(meat, &zi, &zi);
        let k = self.k;
        let cov = &self.a_inv
            * self.pi.transpose()
            * &mz
            * &self.pi
            * &self.a_inv
            * (self.n / (self.n - k as f64));
        let se = cov[(k - 1, k - 1)].max(0.0).sqrt() / self.scale_t;
        let q = self.cols.z.len();
        let hansen_j = if q > 1 {
            // Two-step efficient GMM with weights (Σ u² z zᵀ)⁻¹, in the pass's units.
            let mv = &mz / (self.scale_y * self.scale_y);
            let w = inverse(mv, || FitError::Collinear {
                columns: vec!["instruments (score moments)".into()],
                condition: f64::INFINITY,
            })?;
            let lhs = self.szx.transpose() * &w * &self.szx;
            let lhs_inv = inverse(lhs, || FitError::Collinear {
                columns: vec!["instruments (GMM)".into()],
                condition: f64::INFINITY,
            })?;
            let beta = lhs_inv * (self.szx.transpose() * &w * &self.szy);
            let g = &self.szy - &self.szx * beta;
            let stat = (g.transpose() * &w * &g)[0];
            Some(OverId {
                stat,
                df: q - 1,
                p_value: chi2_upper(stat, q - 1),
            })
        } else {
            None
        };
        Ok(Robust { se, hansen_j })
    }

    /// The Wald ratio's delta-method standard error, for one binary (0/1) instrument and no
    /// covariates, where 2SLS is the ratio of differences in means
    /// `τ = (ȳ₁ − ȳ₀) / (t̄₁ − t̄₀)`: `Var τ = (s₁²/n₁ + s₀²/n₀) / (t̄₁ − t̄₀)²` with `s_g²` the
    /// sample variance of `y − τ t` among rows with instrument value `g` (the residuals sum to
    /// zero within each group, so `s_g² = Σ_g e² / (n_g − 1)`). `meat` as for
    /// [`TwoStage::robust`]; `sum_z` is `Σ v_Z` of the Gram pass. `None` when the shape does not
    /// apply (covariates, several instruments, a group of fewer than two rows).
    pub fn wald_se(&self, meat: &DMatrix<f64>, sum_z: f64) -> Option<f64> {
        if !self.cols.w.is_empty() || self.cols.z.len() != 1 || meat.nrows() < 2 {
            return None;
        }
        let (c, s) = (self.centre_z, self.scale_z);
        let n1 = s * sum_z + self.n * c;
        let n1 = n1.round();
        let n0 = self.n - n1;
        if n1 < 2.0 || n0 < 2.0 {
            return None;
        }
        let both = meat[(0, 0)];
        let ones = (s * meat[(0, 1)] + c * both).clamp(0.0, both);
        let zeros = both - ones;
        let dt = self.first_stage.coef[0];
        let var = (ones / (n1 * (n1 - 1.0)) + zeros / (n0 * (n0 - 1.0))) / (dt * dt);
        Some(var.max(0.0).sqrt())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tests::lcg;

    /// The χ² upper tail at the published 5% critical values (1 and 2 degrees of freedom:
    /// 3.841459, 5.991465; any χ² table) and at x = df (0.3173 for 1: 2Φ(−1)).
    #[test]
    fn chi2_tail() {
        assert!((chi2_upper(3.841_458_820_694_124, 1) - 0.05).abs() < 1e-12);
        assert!((chi2_upper(5.991_464_547_107_979, 2) - 0.05).abs() < 1e-12);
        assert!((chi2_upper(1.0, 1) - 0.317_310_507_862_914_1).abs() < 1e-12);
        assert!((chi2_upper(2.0, 2) - (-1.0f64).exp()).abs() < 1e-14);
        assert_eq!(chi2_upper(0.0, 3), 1.0);
    }

    /// With a single binary instrument and no covariates, 2SLS is the ratio of differences in
    /// means (checked against the direct computation on the same rows), and its delta-method
    /// variance is the one of the formula.
    #[test]
    fn one_binary_instrument_is_the_wald_ratio() {
        let mut s = 3u64;
        let rows: Vec<Vec<f64>> = (0..400)
            .map(|i| {
                let z = f64::from(i % 3 == 0);
                let u = lcg(&mut s);
                let t = f64::from(0.6 * z + u + 0.3 > 0.5);
                let y = 2.0 + 1.5 * t + 2.0 * u + lcg(&mut s);
                vec![z, t, y]
            })
            .collect();
        let names = vec!["z".to_string(), "t".into(), "y".into()];
        let m = Moments::from_rows(names, vec![0.3, 0.5, 2.5], vec![0.5, 0.5, 1.2], &rows).unwrap();
        let c = IvColumns {
            w: vec![],
            z: vec![0],
            t: 1,
            y: 2,
        };
        let f = two_stage(&m, &c).unwrap();
        let mean = |g: f64, col: usize| {
            let v: Vec<f64> = rows.iter().filter(|r| r[0] == g).map(|r| r[col]).collect();
            (v.iter().sum::<f64>() / v.len() as f64, v.len() as f64)
        };
        let ((y1, n1), (y0, n0)) = (mean(1.0, 2), mean(0.0, 2));
        let ((t1, _), (t0, _)) = (mean(1.0, 1), mean(0.0, 1));
        let tau = (y1 - y0) / (t1 - t0);
        assert!(
            (f.effect - tau).abs() < 1e-12 * tau.abs(),
            "{} {tau}",
            f.effect
        );
        assert!((f.first_stage.coef[0] - (t1 - t0)).abs() < 1e-12);
        // Score moments at the design coefficients, then the delta method by hand.
        let v: Vec<Vec<f64>> = rows
            .iter()
            .map(|r| vec![(r[0] - 0.3) / 0.5, (r[1] - 0.5) / 0.5, r[2]])
            .collect();
        let meat = crate::residual_moments_from_rows(&v, &f.design);
        let var_group = |g: f64| {
            let r: Vec<f64> = rows
                .iter()
                .filter(|r| r[0] == g)
                .map(|r| r[2] - tau * r[1])
                .collect();
            let mu = r.iter().sum::<f64>() / r.len() as f64;
            r.iter().map(|x| (x - mu).powi(2)).sum::<f64>() / (r.len() as f64 - 1.0)
        };
        let want = ((var_group(1.0) / n1 + var_group(0.0) / n0) / (t1 - t0).powi(2)).sqrt();
        let got = f.wald_se(&meat, m.sum[0]).unwrap();
        assert!((got - want).abs() < 1e-10 * want, "{got} {want}");
        assert!(f.robust(&meat).unwrap().hansen_j.is_none());
    }
}
