//! The demo scenario: an invented grocery-delivery service that mailed free-delivery vouchers.
//!
//! A deterministic generator writes one row per customer (CSV) and returns the truth: the
//! average effects (ATE, ATT, ATC and CATE by tenure band) computed from each row's two
//! potential outcomes. Targeting is confounded: vouchers went more often to customers with few
//! recent orders and to some zones, and recent orders also drive spend, so the naive difference
//! is negative while the true effect is positive. The voucher works only through app sessions
//! (a mediator), a random mailing wave moves vouchers and nothing else (an instrument), and the
//! `latent` variant adds an unrecorded household income that drives both voucher and outcomes.
//!
//! Key design decision: every row is drawn from its own random stream, seeded from the run seed
//! and the customer id, so a table of any size is a prefix-consistent, reproducible sample and
//! the same generator can later be run in chunks or in parallel.
//!
//! This crate writes rows to a caller's writer and knows nothing of databases or estimators.
#![deny(missing_docs)]

use serde::Serialize;
use std::collections::BTreeMap;
use std::io::{self, Write};

/// Which data-generating process to draw from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Variant {
    /// Every confounder is recorded: backdoor adjustment identifies the effect.
    Observed,
    /// An unrecorded household income also drives voucher and outcomes: only the front-door and
    /// instrument routes identify the effect.
    Latent,
}

impl Variant {
    /// Parses `observed` or `latent`.
    pub fn parse(s: &str) -> Option<Variant> {
        match s {
            "observed" => Some(Variant::Observed),
            "latent" => Some(Variant::Latent),
            _ => None,
        }
    }
}

/// What to generate.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Config {
    /// Number of customers.
    pub rows: u64,
    /// Run seed.
    pub seed: u64,
    /// Data-generating process.
    pub variant: Variant,
}

/// Delivery zones, with their share of customers.
pub const ZONES: [(&str, f64); 6] = [
    ("Northgate", 0.22),
    ("Riverside", 0.18),
    ("Old Town", 0.17),
    ("Hillcrest", 0.16),
    ("Harbour", 0.15),
    ("Eastfield", 0.12),
];
const ZONE_VOUCHER: [f64; 6] = [0.0, 0.6, -0.4, 0.9, -0.2, 0.3];
const ZONE_SPEND: [f64; 6] = [0.0, 6.0, -3.0, 4.0, 8.0, -2.0];
const ZONE_REORDER: [f64; 6] = [0.0, 0.2, -0.1, 0.15, 0.3, -0.05];

/// Tenure bands with their share, baseline weekly app sessions and extra sessions a voucher brings.
pub const TENURE: [(&str, f64, f64, f64); 3] = [
    ("new", 0.30, 2.0, 3.0),
    ("1y", 0.35, 3.0, 2.0),
    ("2y+", 0.35, 4.0, 1.0),
];
const HOUSEHOLD: [f64; 6] = [0.28, 0.30, 0.18, 0.14, 0.07, 0.03];
const WAVE_VOUCHER: [f64; 4] = [0.8, 0.3, -0.3, -0.8];
/// Spend per app session: the voucher's effect on spend is this times the extra sessions.
pub const SPEND_PER_SESSION: f64 = 4.0;

/// One generated customer, with both potential outcomes.
#[derive(Clone, Debug, PartialEq)]
pub struct Customer {
    /// Unit key.
    pub customer_id: u64,
    /// Index into [`ZONES`].
    pub zone: usize,
    /// Index into [`TENURE`].
    pub tenure: usize,
    /// Orders in the previous 90 days.
    pub prior_orders: u32,
    /// People in the household.
    pub household_size: u32,
    /// Mailing wave 1..=4.
    pub mail_wave: u32,
    /// Unrecorded household income (standardised; zero in the observed variant).
    pub income: f64,
    /// Probability of receiving the voucher.
    pub propensity: f64,
    /// Whether a voucher was mailed.
    pub voucher: bool,
    /// App sessions without and with a voucher.
    pub sessions: [u32; 2],
    /// 30-day spend without and with a voucher.
    pub spend: [f64; 2],
    /// Reorder probability without and with a voucher.
    pub reorder_p: [f64; 2],
    /// Reordered within 30 days, without and with a voucher.
    pub reordered: [bool; 2],
}

impl Customer {
    /// Observed app sessions.
    pub fn app_sessions(&self) -> u32 {
        self.sessions[usize::from(self.voucher)]
    }
    /// Observed spend.
    pub fn spend_30d(&self) -> f64 {
        self.spend[usize::from(self.voucher)]
    }
    /// Observed reorder flag.
    pub fn reordered_30d(&self) -> bool {
        self.reordered[usize::from(self.voucher)]
    }
}

/// SplitMix64 (Steele, Lea & Flood 2014), used to seed each row's stream.
fn splitmix(x: &mut u64) -> u64 {
    *x = x.wrapping_add(0x9E3779B97F4A7C15);
    let mut z = *x;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58476D1CE4E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D049BB133111EB);
    z ^ (z >> 31)
}

/// xoshiro256** (Blackman & Vigna 2018).
struct Stream([u64; 4]);

impl Stream {
    fn new(seed: u64, id: u64) -> Stream {
        let mut x = seed ^ id.wrapping_mul(0xD1B54A32D192ED03);
        Stream([
            splitmix(&mut x),
            splitmix(&mut x),
            splitmix(&mut x),
            splitmix(&mut x),
        ])
    }
    fn next(&mut self) -> u64 {
        let s = &mut self.0;
        let result = s[1].wrapping_mul(5).rotate_left(7).wrapping_mul(9);
        let t = s[1] << 17;
        s[2] ^= s[0];
        s[3] ^= s[1];
        s[1] ^= s[2];
        s[0] ^= s[3];
        s[2] ^= t;
        s[3] = s[3].rotate_left(45);
        result
    }
    /// Uniform on [0, 1).
    fn uniform(&mut self) -> f64 {
        (self.next() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }
    fn pick(&mut self, probs: &[f64]) -> usize {
        let u = self.uniform();
        let mut acc = 0.0;
        for (i, p) in probs.iter().enumerate() {
            acc += p;
            if u < acc {
                return i;
            }
        }
        probs.len() - 1
    }
    /// Poisson by multiplication of uniforms (Knuth); fine for the small means used here.
    fn poisson(&mut self, mean: f64) -> u32 {
        let l = (-mean).exp();
        let mut k = 0;
        let mut p = self.uniform();
        while p > l {
            k += 1;
            p *= self.uniform();
        }
        k
    }
    /// Sum of 12 uniforms minus 6: mean 0, variance 1, bounded in [-6, 6].
    fn bounded_normal(&mut self) -> f64 {
        (0..12).map(|_| self.uniform()).sum::<f64>() - 6.0
    }
}

fn sigmoid(x: f64) -> f64 {
    1.0 / (1.0 + (-x).exp())
}

/// Draws customer number `index` (0-based) of a run.
pub fn customer(cfg: &Config, index: u64) -> Customer {
    let customer_id = 100_001 + index;
    let mut r = Stream::new(cfg.seed, customer_id);
    let zone = r.pick(&ZONES.map(|z| z.1));
    let tenure = r.pick(&TENURE.map(|t| t.1));
    let household_size = 1 + r.pick(&HOUSEHOLD) as u32;
    let prior_orders = r.poisson(0.9 + 0.7 * household_size as f64);
    let mail_wave = 1 + (r.next() % 4) as u32;
    // Uniform with unit variance, bounded, so spend stays positive.
    let u = r.uniform();
    let income = match cfg.variant {
        Variant::Observed => 0.0,
        Variant::Latent => (u - 0.5) * 12f64.sqrt(),
    };
    let logit = 0.1 - 0.6 * (prior_orders as f64 - 3.0)
        + ZONE_VOUCHER[zone]
        + WAVE_VOUCHER[mail_wave as usize - 1]
        - 0.7 * income;
    let propensity = sigmoid(logit);
    let voucher = r.uniform() < propensity;
    let (_, _, base, extra) = TENURE[tenure];
    let s0 = r.poisson(base);
    let s1 = s0 + r.poisson(extra);
    let noise = 4.0 * r.bounded_normal();
    let spend_of = |s: u32| {
        42.0 + 8.0 * prior_orders as f64
            + 2.5 * household_size as f64
            + ZONE_SPEND[zone]
            + SPEND_PER_SESSION * s as f64
            + 9.0 * income
            + noise
    };
    let reorder_of = |s: u32| {
        sigmoid(
            -1.2 + 0.25 * s as f64
                + 0.15 * (prior_orders as f64 - 3.0)
                + ZONE_REORDER[zone]
                + 0.5 * income,
        )
    };
    let u_reorder = r.uniform();
    let p = [reorder_of(s0), reorder_of(s1)];
    Customer {
        customer_id,
        zone,
        tenure,
        prior_orders,
        household_size,
        mail_wave,
        income,
        propensity,
        voucher,
        sessions: [s0, s1],
        spend: [spend_of(s0), spend_of(s1)],
        reorder_p: p,
        reordered: [u_reorder < p[0], u_reorder < p[1]],
    }
}

/// The column names, in file order.
pub const COLUMNS: [&str; 10] = [
    "customer_id",
    "zone",
    "tenure_band",
    "prior_orders",
    "household_size",
    "mail_wave",
    "voucher",
    "app_sessions",
    "spend_30d",
    "reordered_30d",
];

/// True effects for one outcome.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct OutcomeTruth {
    /// Mean unit effect over all rows.
    pub ate: f64,
    /// ... over rows that got a voucher.
    pub att: f64,
    /// ... over rows that did not.
    pub atc: f64,
    /// Mean unit effect by tenure band.
    pub cate_by_tenure_band: BTreeMap<String, f64>,
    /// The naive difference of observed means, treated minus control (confounded).
    pub naive_difference: f64,
    /// Expected values of the data-generating process, where they have a closed form.
    pub population: Option<PopulationTruth>,
}

/// Closed-form effects of the data-generating process.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct PopulationTruth {
    /// Expected ATE.
    pub ate: f64,
    /// Expected CATE by tenure band.
    pub cate_by_tenure_band: BTreeMap<String, f64>,
}

/// What a run generated and its true effects.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct Truth {
    /// The generator and scenario.
    pub scenario: String,
    /// Variant.
    pub variant: Variant,
    /// Seed.
    pub seed: u64,
    /// Rows written.
    pub rows: u64,
    /// Rows with a voucher.
    pub treated: u64,
    /// How unit effects are defined.
    pub definition: String,
    /// Per outcome.
    pub outcomes: BTreeMap<String, OutcomeTruth>,
}

#[derive(Default)]
struct Acc {
    all: (f64, u64),
    arm: [(f64, u64); 2],
    band: [(f64, u64); 3],
    observed: [(f64, u64); 2],
}

impl Acc {
    fn add(&mut self, c: &Customer, effect: f64, observed: f64) {
        let t = usize::from(c.voucher);
        self.all.0 += effect;
        self.all.1 += 1;
        self.arm[t].0 += effect;
        self.arm[t].1 += 1;
        self.band[c.tenure].0 += effect;
        self.band[c.tenure].1 += 1;
        self.observed[t].0 += observed;
        self.observed[t].1 += 1;
    }
    fn finish(&self, population: Option<PopulationTruth>) -> OutcomeTruth {
        let m = |(s, n): (f64, u64)| if n == 0 { f64::NAN } else { s / n as f64 };
        OutcomeTruth {
            ate: m(self.all),
            att: m(self.arm[1]),
            atc: m(self.arm[0]),
            cate_by_tenure_band: TENURE
                .iter()
                .enumerate()
                .map(|(i, t)| (t.0.to_string(), m(self.band[i])))
                .collect(),
            naive_difference: m(self.observed[1]) - m(self.observed[0]),
            population,
        }
    }
}

/// Writes `cfg.rows` customers as CSV (header first) and returns the truth.
pub fn write_csv<W: Write>(cfg: &Config, out: W) -> io::Result<Truth> {
    let mut w = io::BufWriter::with_capacity(1 << 20, out);
    writeln!(w, "{}", COLUMNS.join(","))?;
    let (mut spend, mut reorder) = (Acc::default(), Acc::default());
    let mut treated = 0;
    for i in 0..cfg.rows {
        let c = customer(cfg, i);
        treated += u64::from(c.voucher);
        writeln!(
            w,
            "{},{},{},{},{},{},{},{},{:.2},{}",
            c.customer_id,
            ZONES[c.zone].0,
            TENURE[c.tenure].0,
            c.prior_orders,
            c.household_size,
            c.mail_wave,
            u8::from(c.voucher),
            c.app_sessions(),
            c.spend_30d(),
            u8::from(c.reordered_30d())
        )?;
        spend.add(&c, c.spend[1] - c.spend[0], c.spend_30d());
        reorder.add(
            &c,
            c.reorder_p[1] - c.reorder_p[0],
            f64::from(u8::from(c.reordered_30d())),
        );
    }
    w.flush()?;
    let band: BTreeMap<String, f64> = TENURE
        .iter()
        .map(|t| (t.0.to_string(), SPEND_PER_SESSION * t.3))
        .collect();
    let pop_ate = TENURE.iter().map(|t| t.1 * SPEND_PER_SESSION * t.3).sum();
    let mut outcomes = BTreeMap::new();
    outcomes.insert(
        "spend_30d".to_string(),
        spend.finish(Some(PopulationTruth {
            ate: pop_ate,
            cate_by_tenure_band: band,
        })),
    );
    outcomes.insert("reordered_30d".to_string(), reorder.finish(None));
    Ok(Truth {
        scenario: "upshot demo: free-delivery vouchers of a grocery-delivery service (invented)".into(),
        variant: cfg.variant,
        seed: cfg.seed,
        rows: cfg.rows,
        treated,
        definition: "unit effect = potential outcome with voucher minus without, same unit and same random draws; for reordered_30d the difference of reorder probabilities".into(),
        outcomes,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn deterministic_and_prefix_consistent() {
        let cfg = Config {
            rows: 500,
            seed: 7,
            variant: Variant::Observed,
        };
        let mut a = Vec::new();
        let mut b = Vec::new();
        write_csv(&cfg, &mut a).unwrap();
        write_csv(&Config { rows: 300, ..cfg }, &mut b).unwrap();
        assert!(a.starts_with(&b));
        let mut c = Vec::new();
        write_csv(&cfg, &mut c).unwrap();
        assert_eq!(a, c);
    }

    #[test]
    fn naive_difference_is_negative_while_the_effect_is_positive() {
        for variant in [Variant::Observed, Variant::Latent] {
            let cfg = Config {
                rows: 20_000,
                seed: 11,
                variant,
            };
            let t = write_csv(&cfg, io::sink()).unwrap();
            let s = &t.outcomes["spend_30d"];
            assert!(s.ate > 6.0 && s.ate < 9.5, "{s:?}");
            assert!(s.naive_difference < 0.0, "{s:?}");
            assert!(s.cate_by_tenure_band["new"] > s.cate_by_tenure_band["2y+"]);
            let r = &t.outcomes["reordered_30d"];
            assert!(r.ate > 0.0);
            let share = t.treated as f64 / t.rows as f64;
            assert!(share > 0.2 && share < 0.8, "{share}");
        }
    }

    #[test]
    fn spend_is_positive_and_effect_flows_through_sessions() {
        for variant in [Variant::Observed, Variant::Latent] {
            let cfg = Config {
                rows: 20_000,
                seed: 3,
                variant,
            };
            for i in 0..cfg.rows {
                let c = customer(&cfg, i);
                assert!(c.spend[0] > 0.0 && c.spend[1] > 0.0);
                let d = c.spend[1] - c.spend[0];
                assert!(
                    (d - SPEND_PER_SESSION * f64::from(c.sessions[1] - c.sessions[0])).abs() < 1e-9
                );
            }
        }
    }
}
