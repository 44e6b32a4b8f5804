//! `wallflux tc`: ITS-90 conversion beside a calibrator.

use anyhow::anyhow;

use super::cli::TcArgs;
use super::Failure;
use crate::physics::thermocouple::{self, TcType};

/// Rounds to `decimals` places (for display: the reference tables give mV to
/// 0.001 and the inverse is exact to better than 0.001 °C).
fn round(v: f64, decimals: i32) -> f64 {
    let p = 10f64.powi(decimals);
    (v * p).round() / p
}

/// One line on stdout; a closed pipe ends quietly.
fn emit(line: &str) -> Result<(), Failure> {
    super::write_stdout(&format!("{line}\n")).map(|_| ())
}

pub fn tc(args: &TcArgs) -> Result<(), Failure> {
    let tc = match TcType::from_letter(&args.tc_type) {
        Some(t) if args.tc_type.len() == 1 => t,
        _ => {
            return Err(Failure::usage(anyhow!(
                "--type {:?} is not a thermocouple type; use one of B E J K N R S T",
                args.tc_type
            )))
        }
    };
    let letter = tc.letter().to_string();
    if let Some(t) = args.celsius {
        let mv = thermocouple::emf_mv(tc, t).map_err(|e| Failure::usage(anyhow!("{e}")))?;
        if args.json {
            emit(&format!(
                "{}",
                serde_json::json!({"type": letter, "celsius": t, "millivolts": round(mv, 3)})
            ))?;
        } else {
            emit(&format!(
                "type {letter}: {t} °C = {:.3} mV (ITS-90, 0 °C reference junction)",
                mv
            ))?;
        }
        return Ok(());
    }
    let Some(mv) = args.mv else {
        return Err(Failure::usage(anyhow!("give --celsius or --mv")));
    };
    let cj = args.cj_c.unwrap_or(0.0);
    let t = thermocouple::compensated_c(tc, mv, cj).map_err(|e| Failure::usage(anyhow!("{e}")))?;
    if args.json {
        let mut v = serde_json::json!({"type": letter, "millivolts": mv, "celsius": round(t, 3)});
        if let Some(cj) = args.cj_c {
            v["cj_c"] = serde_json::json!(cj);
        }
        emit(&format!("{v}"))?;
    } else if args.cj_c.is_some() {
        emit(&format!(
            "type {letter}: {mv} mV with the cold junction at {cj} °C = {:.2} °C (ITS-90)",
            t
        ))?;
    } else {
        emit(&format!(
            "type {letter}: {mv} mV = {:.2} °C (ITS-90, 0 °C reference junction)",
            t
        ))?;
    }
    Ok(())
}
