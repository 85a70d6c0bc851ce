//! Exports of a campaign: its solutions, its per-unit ledger (who computed which unit, when,
//! with which digest) and its coverage table (every target: bound, certified or not, solution
//! count, certificate root), as CSV (RFC 4180: comma-separated, `\r\n`-free, fields quoted
//! when they hold a comma, quote or line break) or as a JSON array.
//!
//! An [`Export`] reads the store a page at a time ([`PAGE_ROWS`] rows) and hands out each
//! page as one chunk of bytes, so neither the command line nor the HTTP answer (which streams
//! the chunks) holds more than a page in memory.

use crate::model;
use crate::store::{CampaignRow, Store, TargetRow};
use anyhow::{anyhow, Context, Result};
use cubehunt_common::cert::utc_text;
use cubehunt_common::heuristic;
use serde::Serialize;
use std::io::Write;

/// Rows read from the store per page, and so per chunk of output.
pub const PAGE_ROWS: i64 = 500;

#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum What {
    Solutions,
    Ledger,
    Coverage,
}

impl What {
    pub fn parse(s: &str) -> Option<What> {
        match s {
            "solutions" => Some(What::Solutions),
            "ledger" => Some(What::Ledger),
            "coverage" => Some(What::Coverage),
            _ => None,
        }
    }
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

fn csv_line(out: &mut dyn Write, fields: &[String]) -> std::io::Result<()> {
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
    /// The parametric family, e.g. `Verebrusov 1908, t = 1`; `null` when none.
    family: Option<String>,
}

#[derive(Serialize)]
struct CoverageOut<'a> {
    campaign: &'a str,
    k: i64,
    bound: u64,
    units: i64,
    units_settled: i64,
    /// Every unit settled.
    complete: bool,
    /// A current certificate covers the target's bound.
    certified: bool,
    /// The largest bound a current certificate covers (`null`: none).
    certified_bound: Option<u64>,
    /// The certificate's Merkle root (RFC 6962 over its units) at the target's bound.
    certificate_root: Option<String>,
    solutions: i64,
    /// Solutions in a parametric family (Mahler 1936, Verebrusov 1908).
    family_solutions: i64,
}

const SOLUTION_COLUMNS: [&str; 8] = ["campaign", "k", "x", "y", "z", "unit", "found_at", "family"];
const LEDGER_COLUMNS: [&str; 19] = [
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
];
const COVERAGE_COLUMNS: [&str; 11] = [
    "campaign",
    "k",
    "bound",
    "units",
    "units_settled",
    "complete",
    "certified",
    "certified_bound",
    "certificate_root",
    "solutions",
    "family_solutions",
];

/// Where an export is.
enum Stage {
    Header,
    /// Solutions: target index and last solution id.
    Solutions(usize, i64),
    /// Ledger: last report id.
    Ledger(i64),
    /// Coverage: last k.
    Coverage(i64),
    Footer,
    Done,
}

/// One export in progress: call [`Export::next_chunk`] until it returns `None`.
pub struct Export<'a> {
    store: &'a Store,
    campaign: CampaignRow,
    targets: Vec<TargetRow>,
    what: What,
    format: Format,
    stage: Stage,
    rows: u64,
}

impl<'a> Export<'a> {
    /// Start the export of campaign `name` (an error when there is none).
    pub async fn open(
        store: &'a Store,
        name: &str,
        what: What,
        format: Format,
    ) -> Result<Export<'a>> {
        let campaign = store.campaign(name).await?.ok_or_else(|| {
            anyhow!(
                "no campaign named {name:?} (list them with `cubehunt-coordinator campaign list`)"
            )
        })?;
        let targets = if what == What::Solutions {
            store.targets(campaign.id).await?
        } else {
            Vec::new()
        };
        Ok(Export {
            store,
            campaign,
            targets,
            what,
            format,
            stage: Stage::Header,
            rows: 0,
        })
    }

    /// Rows handed out so far.
    pub fn rows(&self) -> u64 {
        self.rows
    }

    fn item(&mut self, buf: &mut Vec<u8>, v: &dyn erased::Json) -> Result<()> {
        buf.extend_from_slice(if self.rows == 0 { b"[\n" } else { b",\n" });
        buf.extend_from_slice(&v.to_json()?);
        self.rows += 1;
        Ok(())
    }

    fn line(&mut self, buf: &mut Vec<u8>, fields: &[String]) -> Result<()> {
        csv_line(buf, fields)?;
        self.rows += 1;
        Ok(())
    }

    /// The next chunk of output (a header, one page of rows, or the closing bracket), or
    /// `None` at the end.
    pub async fn next_chunk(&mut self) -> Result<Option<Vec<u8>>> {
        let mut buf = Vec::new();
        loop {
            match self.stage {
                Stage::Header => {
                    if self.format == Format::Csv {
                        let cols: &[&str] = match self.what {
                            What::Solutions => &SOLUTION_COLUMNS,
                            What::Ledger => &LEDGER_COLUMNS,
                            What::Coverage => &COVERAGE_COLUMNS,
                        };
                        let cols: Vec<String> = cols.iter().map(|c| c.to_string()).collect();
                        csv_line(&mut buf, &cols)?;
                    }
                    self.stage = match self.what {
                        What::Solutions => Stage::Solutions(0, 0),
                        What::Ledger => Stage::Ledger(0),
                        What::Coverage => Stage::Coverage(i64::MIN),
                    };
                    if !buf.is_empty() {
                        return Ok(Some(buf));
                    }
                }
                Stage::Solutions(ti, after) => {
                    let Some(t) = self.targets.get(ti).cloned() else {
                        self.stage = Stage::Footer;
                        continue;
                    };
                    let page = self.store.solutions_page(t.id, after, PAGE_ROWS).await?;
                    let Some(last) = page.last() else {
                        self.stage = Stage::Solutions(ti + 1, 0);
                        continue;
                    };
                    self.stage = Stage::Solutions(ti, last.id);
                    let name = self.campaign.name.clone();
                    for s in &page {
                        let [a, b, c] = s.solution.to_strings();
                        let family = model::family_text(t.k, &s.solution);
                        match self.format {
                            Format::Csv => self.line(
                                &mut buf,
                                &[
                                    name.clone(),
                                    t.k.to_string(),
                                    a,
                                    b,
                                    c,
                                    s.unit_id.to_string(),
                                    utc_text(s.found_at),
                                    family.unwrap_or_default(),
                                ],
                            )?,
                            Format::Json => {
                                let v = SolutionOut {
                                    campaign: &name,
                                    k: t.k,
                                    solution: [a, b, c],
                                    unit: s.unit_id,
                                    found_at: s.found_at,
                                    found_at_utc: utc_text(s.found_at),
                                    family,
                                };
                                self.item(&mut buf, &v)?
                            }
                        }
                    }
                    return Ok(Some(buf));
                }
                Stage::Ledger(after) => {
                    let page = self
                        .store
                        .ledger_page(self.campaign.id, after, PAGE_ROWS)
                        .await?;
                    let Some(last) = page.last() else {
                        self.stage = Stage::Footer;
                        continue;
                    };
                    self.stage = Stage::Ledger(last.report);
                    for r in &page {
                        match self.format {
                            Format::Csv => self.line(
                                &mut buf,
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
                            Format::Json => self.item(&mut buf, r)?,
                        }
                    }
                    return Ok(Some(buf));
                }
                Stage::Coverage(after) => {
                    let page = self
                        .store
                        .coverage_page(self.campaign.id, after, PAGE_ROWS)
                        .await?;
                    let Some(last) = page.last() else {
                        self.stage = Stage::Footer;
                        continue;
                    };
                    self.stage = Stage::Coverage(last.k);
                    let name = self.campaign.name.clone();
                    for r in &page {
                        let families = if heuristic::has_family(r.k) && r.solutions > 0 {
                            self.family_count(r.target_id, r.k).await?
                        } else {
                            0
                        };
                        let complete = r.units > 0 && r.units_settled == r.units;
                        let certified = r.certificate_root.is_some();
                        match self.format {
                            Format::Csv => self.line(
                                &mut buf,
                                &[
                                    name.clone(),
                                    r.k.to_string(),
                                    r.bound.to_string(),
                                    r.units.to_string(),
                                    r.units_settled.to_string(),
                                    complete.to_string(),
                                    certified.to_string(),
                                    r.certified_bound.map(|b| b.to_string()).unwrap_or_default(),
                                    r.certificate_root.clone().unwrap_or_default(),
                                    r.solutions.to_string(),
                                    families.to_string(),
                                ],
                            )?,
                            Format::Json => {
                                let v = CoverageOut {
                                    campaign: &name,
                                    k: r.k,
                                    bound: r.bound,
                                    units: r.units,
                                    units_settled: r.units_settled,
                                    complete,
                                    certified,
                                    certified_bound: r.certified_bound,
                                    certificate_root: r.certificate_root.clone(),
                                    solutions: r.solutions,
                                    family_solutions: families,
                                };
                                self.item(&mut buf, &v)?
                            }
                        }
                    }
                    return Ok(Some(buf));
                }
                Stage::Footer => {
                    self.stage = Stage::Done;
                    if self.format == Format::Json {
                        buf.extend_from_slice(if self.rows == 0 { b"[]\n" } else { b"\n]\n" });
                        return Ok(Some(buf));
                    }
                }
                Stage::Done => return Ok(None),
            }
        }
    }

    /// Solutions of a target in a parametric family, read a page at a time.
    async fn family_count(&self, target_id: i64, k: i64) -> Result<i64> {
        let (mut after, mut n) = (0, 0);
        loop {
            let page = self
                .store
                .solutions_page(target_id, after, PAGE_ROWS)
                .await?;
            let Some(last) = page.last() else {
                return Ok(n);
            };
            after = last.id;
            n += page
                .iter()
                .filter(|s| model::family_text(k, &s.solution).is_some())
                .count() as i64;
        }
    }
}

/// Write the export of campaign `name` a page at a time; returns the number of rows.
pub async fn export(
    store: &Store,
    name: &str,
    what: What,
    format: Format,
    out: &mut (dyn Write + Send),
) -> Result<u64> {
    let mut e = Export::open(store, name, what, format).await?;
    while let Some(chunk) = e.next_chunk().await? {
        out.write_all(&chunk).context("writing the export")?;
    }
    out.flush().context("writing the export")?;
    Ok(e.rows())
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
