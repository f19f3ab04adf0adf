//! What one benchmark row estimates: a method, a design width and whether it is segmented.

use serde::Serialize;
use upshot_methods::Method;

/// One benchmark workload on the benchmark table `customers`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct Work {
    /// The method.
    #[serde(serialize_with = "method_key")]
    pub method: Method,
    /// Design width: 8 or 32 covariate columns (stratify uses its strata instead).
    pub p: usize,
    /// Grouped by the ten-level `region` column.
    pub segments: bool,
}

fn method_key<S: serde::Serializer>(m: &Method, s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str(m.as_str())
}

/// Every method the benchmark measures, in report order.
pub const METHODS: [Method; 5] = [
    Method::Stratify,
    Method::Regress,
    Method::Weight,
    Method::DoublyRobust,
    Method::PartialOut,
];

/// The method with key `k`.
pub fn method(k: &str) -> Option<Method> {
    METHODS.into_iter().find(|m| m.as_str() == k)
}

/// Zone levels other than the reference (`Northgate`, the most frequent): the one-hot columns.
pub fn zone_dummies() -> Vec<&'static str> {
    upshot_demo::ZONES[1..].iter().map(|z| z.0).collect()
}

/// Cross-fitting folds of the fold-using methods.
pub const FOLDS: u32 = 5;

/// Propensity clip (upshot's default).
pub const CLIP: f64 = 0.01;

impl Work {
    /// Numeric covariates: three demo columns (8 design columns with the five zone dummies), or
    /// those and the 24 extra ones (32).
    pub fn numeric(&self) -> Vec<String> {
        let mut v: Vec<String> = ["household_size", "prior_orders", "mail_wave"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        if self.p > 8 {
            v.extend((0..crate::data::EXTRA).map(crate::data::extra));
        }
        v
    }

    /// Stratify's strata columns: prior orders (numeric, few values) and zone.
    pub fn strata(&self) -> Vec<String> {
        vec!["prior_orders".into(), "zone".into()]
    }

    /// The adjustment set handed to upshot.
    pub fn adjust(&self) -> Vec<String> {
        if self.method == Method::Stratify {
            return self.strata();
        }
        let mut v = self.numeric();
        v.push("zone".into());
        v
    }

    /// Whether the method cross-fits.
    pub fn folds(&self) -> u32 {
        match self.method {
            Method::DoublyRobust | Method::PartialOut => FOLDS,
            _ => 1,
        }
    }

    /// The estimation request of this workload on `source`, for any engine: the columns as the
    /// engine reports them, the flavor the passes are built for.
    pub fn spec(
        &self,
        engine: &dyn upshot_engine::Engine,
        flavor: upshot_sql::Flavor,
        source: upshot_sql::Source,
    ) -> Result<upshot_methods::Spec, String> {
        let columns = engine
            .columns(&source)
            .map_err(|e| e.to_string())?
            .into_iter()
            .map(|c| upshot_methods::ColumnType {
                name: c.name,
                type_name: c.type_name,
                numeric: c.numeric,
                integer: c.integer,
                boolean: c.boolean,
            })
            .collect();
        Ok(upshot_methods::Spec {
            flavor,
            question: "bench".into(),
            source,
            filter: None,
            treatment: "voucher".into(),
            outcome: "spend_30d".into(),
            adjust: self.adjust(),
            instruments: vec![],
            mediators: vec![],
            bins: vec![],
            matching: Default::default(),
            segments: if self.segments {
                vec!["region".into()]
            } else {
                vec![]
            },
            segment_bins: None,
            estimand: upshot_methods::Estimand::Ate,
            method: self.method,
            folds: self.folds(),
            unit: Some("customer_id".into()),
            on_null: upshot_methods::NullPolicy::Exclude,
            clip: CLIP,
            categorical: vec!["zone".into(), "region".into()],
            basis: upshot_methods::Basis::default(),
            columns: Some(columns),
        })
    }

    /// A short label: `regress p=8 seg`.
    pub fn label(&self) -> String {
        let p = if self.method == Method::Stratify {
            "-".to_string()
        } else {
            self.p.to_string()
        };
        format!(
            "{} p={} {}",
            self.method.as_str(),
            p,
            if self.segments { "seg" } else { "all" }
        )
    }
}
