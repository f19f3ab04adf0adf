//! `upshot demo`: writes the invented voucher scenario (rows and truth) to a folder.

use crate::exit::{Failure, OK};
use std::fs;
use std::path::PathBuf;
use upshot_demo::{write_csv, Config, Variant};

/// Flags of `upshot demo`.
#[derive(clap::Args)]
pub struct Args {
    /// Folder to write into (created if missing).
    #[arg(long, default_value = "upshot-demo")]
    out: PathBuf,
    /// Number of customers.
    #[arg(long, default_value_t = 100_000)]
    rows: u64,
    /// Random seed; the same seed and size give the same rows.
    #[arg(long, default_value_t = 20261202)]
    seed: u64,
    /// `observed` (every confounder recorded), `latent` (an unrecorded income), or `both`.
    #[arg(long, default_value = "both")]
    variant: String,
}

pub fn run(a: Args) -> Result<i32, Failure> {
    let variants = match a.variant.as_str() {
        "both" => vec![Variant::Observed, Variant::Latent],
        v => vec![Variant::parse(v).ok_or_else(|| {
            Failure::input(format!(
                "--variant: unknown variant `{v}`; expected observed, latent or both"
            ))
        })?],
    };
    if a.rows == 0 {
        return Err(Failure::input("--rows: must be at least 1"));
    }
    fs::create_dir_all(&a.out).map_err(|e| {
        Failure::input(format!(
            "--out: cannot create {}: {e}; choose a writable folder",
            a.out.display()
        ))
    })?;
    for v in variants {
        let stem = match v {
            Variant::Observed => "customers",
            Variant::Latent => "customers_latent",
        };
        let csv = a.out.join(format!("{stem}.csv"));
        let tmp = a.out.join(format!(".{stem}.csv.partial"));
        let file = fs::File::create(&tmp)
            .map_err(|e| Failure::internal(format!("cannot write {}: {e}", tmp.display())))?;
        let cfg = Config {
            rows: a.rows,
            seed: a.seed,
            variant: v,
        };
        let truth = write_csv(&cfg, file).map_err(|e| {
            let _ = fs::remove_file(&tmp);
            Failure::internal(format!("cannot write {}: {e}", tmp.display()))
        })?;
        fs::rename(&tmp, &csv).map_err(|e| {
            Failure::internal(format!("cannot move {} into place: {e}", csv.display()))
        })?;
        let truth_path = a.out.join(format!("{stem}.truth.json"));
        let json =
            serde_json::to_string_pretty(&truth).map_err(|e| Failure::internal(e.to_string()))?;
        fs::write(&truth_path, json + "\n").map_err(|e| {
            Failure::internal(format!("cannot write {}: {e}", truth_path.display()))
        })?;
        let s = &truth.outcomes["spend_30d"];
        crate::exit::emit(&format!(
            "wrote {} ({} rows, {} with a voucher) and {}: true ATE on spend_30d {:.3}, naive difference {:.3}\n",
            csv.display(),
            truth.rows,
            truth.treated,
            truth_path.display(),
            s.ate,
            s.naive_difference
        ))?;
    }
    Ok(OK)
}
