//! Exports of a campaign's solutions and of its per-unit ledger (who computed which unit,
//! when, with which digest), as CSV (RFC 4180: comma-separated, `\r\n`-free, fields quoted
//! when they hold a comma, quote or line break) or as a JSON array. Written row by row, so a
//! large ledger does not sit in memory.

use crate::store::Store;
use anyhow::{anyhow, Context, Result};
use cubehunt_common::cert::utc_text;
use serde::Serialize;
use std::io::Write;

#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum What {
    Solutions,
    Ledger,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Format {
    Csv,
    Json,
}

/// One CSV field.
pub fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

fn csv_line(out: &mut (dyn Write + Send), fields: &[String]) -> std::io::Result<()> {
    let line: Vec<String> = fields.iter().map(|f| csv_field(f)).collect();
    writeln!(out, "{}", line.join(","))
}

#[derive(Serialize)]
struct SolutionOut<'a> {
    campaign: &'a str,
    k: i64,
    solution: [String; 3],
    unit: i64,
    found_at: i64,
    found_at_utc: String,
}

/// Write the export of campaign `name`; returns the number of rows.
pub async fn export(
    store: &Store,
    name: &str,
    what: What,
    format: Format,
    out: &mut (dyn Write + Send),
) -> Result<u64> {
    let c = store.campaign(name).await?.ok_or_else(|| {
        anyhow!("no campaign named {name:?} (list them with `cubehunt-coordinator campaign list`)")
    })?;
    let mut n = 0u64;
    let json_item = |out: &mut (dyn Write + Send), v: &dyn erased::Json, n: u64| -> Result<()> {
        out.write_all(if n == 0 { b"[\n" } else { b",\n" })?;
        out.write_all(&v.to_json()?)?;
        Ok(())
    };
    match what {
        What::Solutions => {
            if format == Format::Csv {
                csv_line(
                    out,
                    &["campaign", "k", "x", "y", "z", "unit", "found_at"].map(String::from),
                )?;
            }
            for s in store.campaign_solutions(c.id).await? {
                let [a, b, cc] = s.solution.to_strings();
                match format {
                    Format::Csv => csv_line(
                        out,
                        &[
                            c.name.clone(),
                            s.k.to_string(),
                            a,
                            b,
                            cc,
                            s.unit_id.to_string(),
                            utc_text(s.found_at),
                        ],
                    )?,
                    Format::Json => {
                        let v = SolutionOut {
                            campaign: &c.name,
                            k: s.k,
                            solution: [a, b, cc],
                            unit: s.unit_id,
                            found_at: s.found_at,
                            found_at_utc: utc_text(s.found_at),
                        };
                        json_item(out, &v, n)?;
                    }
                }
                n += 1;
            }
        }
        What::Ledger => {
            if format == Format::Csv {
                csv_line(
                    out,
                    &[
                        "campaign",
                        "k",
                        "unit",
                        "region",
                        "d_lo",
                        "d_hi",
                        "z_lo",
                        "z_hi",
                        "unit_state",
                        "settled_digest",
                        "report",
                        "worker",
                        "owner",
                        "label",
                        "leased_at",
                        "reported_at",
                        "elapsed_s",
                        "digest",
                        "verdict",
                    ]
                    .map(String::from),
                )?;
            }
            let mut after = 0;
            loop {
                let page = store.ledger_page(c.id, after, 5000).await?;
                let Some(last) = page.last() else { break };
                after = last.report;
                for r in &page {
                    match format {
                        Format::Csv => csv_line(
                            out,
                            &[
                                r.campaign.clone(),
                                r.k.to_string(),
                                r.unit.to_string(),
                                r.region.clone(),
                                r.d_lo.to_string(),
                                r.d_hi.to_string(),
                                r.z_lo.to_string(),
                                r.z_hi.to_string(),
                                r.unit_state.clone(),
                                r.settled_digest.clone().unwrap_or_default(),
                                r.report.to_string(),
                                r.worker.to_string(),
                                r.owner.clone(),
                                r.label.clone(),
                                r.leased_at.map(utc_text).unwrap_or_default(),
                                utc_text(r.reported_at),
                                format!("{:.3}", r.elapsed_s),
                                r.digest.clone(),
                                r.verdict.clone(),
                            ],
                        )?,
                        Format::Json => json_item(out, r, n)?,
                    }
                    n += 1;
                }
            }
        }
    }
    if format == Format::Json {
        out.write_all(if n == 0 { b"[]\n" } else { b"\n]\n" })?;
    }
    out.flush().context("writing the export")?;
    Ok(n)
}

mod erased {
    /// Serialise without naming the type (so one closure serves every row type).
    pub trait Json {
        fn to_json(&self) -> serde_json::Result<Vec<u8>>;
    }
    impl<T: serde::Serialize> Json for T {
        fn to_json(&self) -> serde_json::Result<Vec<u8>> {
            serde_json::to_vec(self)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn csv_quoting_follows_rfc4180() {
        // RFC 4180 (Y. Shafranovich, 2005), §2 rules 6 and 7.
        assert_eq!(csv_field("plain"), "plain");
        assert_eq!(csv_field("a,b"), "\"a,b\"");
        assert_eq!(csv_field("say \"hi\""), "\"say \"\"hi\"\"\"");
        assert_eq!(csv_field("two\nlines"), "\"two\nlines\"");
    }
}
