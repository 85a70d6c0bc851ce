//! `campaign …`: the admin API from the command line.

use crate::api::admin::{Count, CreateCampaign, ExtendCampaign, KList};
use crate::api::monitor::CampaignView;
use crate::datadir::DataDir;
use anyhow::{bail, Context, Result};
use clap::{Args, Subcommand};
use cubehunt_common::heuristic::Verdict;
use cubehunt_common::protocol::ApiError;
use std::path::PathBuf;

#[derive(Debug, Args)]
pub struct CampaignArgs {
    /// Coordinator URL (default: read from <data-dir>/listen.url).
    #[arg(long, global = true, env = "CUBEHUNT_URL")]
    pub url: Option<String>,
    /// Admin token (default: read from <data-dir>/admin.token).
    #[arg(
        long,
        global = true,
        env = "CUBEHUNT_ADMIN_TOKEN",
        hide_env_values = true
    )]
    pub admin_token: Option<String>,
    /// Data directory of a local coordinator, to read the URL and token from.
    #[arg(long, global = true, env = "CUBEHUNT_DATA_DIR")]
    pub data_dir: Option<PathBuf>,
    #[command(subcommand)]
    pub command: CampaignCommand,
}

#[derive(Debug, Subcommand)]
pub enum CampaignCommand {
    /// Create a campaign: plan and sign every unit of every target.
    #[command(
        long_about = "Create a campaign: plan and sign every unit of every target.\n\n\
--k takes what `plan --k` takes: K, a list K,K,…, a range A..B (both ends included, negative \
values allowed), or a mix (e.g. 3,33,100..200). A value of a range that cannot be a target — \
k ≡ ±4 (mod 9), which has no solutions; a cube, whose trivial family (c, t, −t) is infinite; \
or 0 — is skipped, and the skipped values are listed with the reason. A value named on its \
own that cannot be a target is refused. With --strict, a range holding such a value is \
refused too, naming it, and nothing is created."
    )]
    Create {
        /// 1–64 characters of A-Z a-z 0-9 . _ -
        #[arg(long)]
        name: String,
        /// Targets: K, K,K,…, A..B or a mix (e.g. 114,390 or 100..200,390).
        #[arg(long = "k", value_name = "K[,K…|A..B]")]
        ks: String,
        /// Bound on the smallest coordinate (e.g. 1e12).
        #[arg(long)]
        bound: String,
        /// Planning goal: seconds of one reference core per unit.
        #[arg(long, default_value_t = crate::api::admin::DEFAULT_UNIT_SECONDS)]
        unit_seconds: f64,
        /// Refuse the whole request if a range holds a k that cannot be a target (±4 mod 9,
        /// a cube, 0) instead of skipping it.
        #[arg(long)]
        strict: bool,
        /// Print the campaign as JSON.
        #[arg(long)]
        json: bool,
    },
    /// List campaigns.
    List {
        #[arg(long)]
        json: bool,
    },
    /// Show one campaign: state, progress per target, found versus expected (density
    /// model), solutions (family members marked).
    Show {
        name: String,
        #[arg(long)]
        json: bool,
    },
    /// Stop handing out units of a campaign.
    Pause { name: String },
    /// Hand out units of a paused campaign again.
    Resume { name: String },
    /// Stop a campaign for good.
    Cancel { name: String },
    /// Raise the bound of every target (plans only the new part).
    Extend {
        name: String,
        #[arg(long)]
        bound: String,
        #[arg(long)]
        json: bool,
    },
}

struct Client {
    http: reqwest::Client,
    url: String,
    token: String,
}

impl Client {
    fn new(a: &CampaignArgs) -> Result<Client> {
        let dir = a.data_dir.as_ref().map(DataDir::new);
        let url = match (&a.url, &dir) {
            (Some(u), _) => u.clone(),
            (None, Some(d)) => d.url()?,
            (None, None) => bail!("say where the coordinator is: --url URL, or --data-dir DIR of a running local coordinator"),
        };
        let token = match (&a.admin_token, &dir) {
            (Some(t), _) => t.clone(),
            (None, Some(d)) => d.admin_token()?,
            (None, None) => bail!("the admin API needs a token: --admin-token TOKEN, or --data-dir DIR to read it from"),
        };
        let http = reqwest::Client::builder()
            .timeout(std::time::Duration::from_secs(3600))
            .build()?;
        Ok(Client {
            http,
            url: url.trim_end_matches('/').to_string(),
            token,
        })
    }

    async fn call(
        &self,
        method: reqwest::Method,
        path: &str,
        body: Option<serde_json::Value>,
    ) -> Result<serde_json::Value> {
        let url = format!("{}{path}", self.url);
        let mut req = self.http.request(method, &url).bearer_auth(&self.token);
        if let Some(b) = body {
            req = req.json(&b);
        }
        let resp = req.send().await.with_context(|| {
            format!("cannot reach the coordinator at {url}: is `serve` running?")
        })?;
        let status = resp.status();
        let text = resp.text().await?;
        if !status.is_success() {
            if let Ok(e) = serde_json::from_str::<ApiError>(&text) {
                bail!("{} ({}, HTTP {})", e.message, e.error, status.as_u16());
            }
            bail!(
                "HTTP {status} from {url}: {}",
                text.chars().take(500).collect::<String>()
            );
        }
        serde_json::from_str(&text).with_context(|| format!("unreadable answer from {url}"))
    }
}

fn print_campaign(v: &CampaignView) {
    println!(
        "campaign {}  state {}  bound {}  kernel {}",
        v.name, v.state, v.bound, v.kernel
    );
    if !v.skipped.is_empty() {
        println!("skipped {} value(s) of k:", v.skipped.len());
        for s in &v.skipped {
            println!("  k = {}: {}", s.k, s.reason);
        }
    }
    let eta = |e: Option<f64>| e.map(|s| format!("{s:.0} s")).unwrap_or_else(|| "-".into());
    for t in &v.targets {
        let u = &t.progress.units;
        println!(
            "  k = {:<8} units {}/{} settled ({} leased, {} disputed)  work {:.1}%  ETA {}  solutions {}",
            t.k,
            u.settled,
            u.total,
            u.leased,
            u.disputed,
            100.0 * t.progress.fraction,
            eta(t.progress.eta_s),
            t.solutions.len()
        );
        if let Some(m) = &t.model {
            println!(
                "      found {} vs expected {:.3} ({:.0} % interval {}..={}, {})  S(k) {:.5}{}",
                m.found,
                m.expected_total,
                v.model.level * 100.0,
                m.low,
                m.high,
                match m.verdict {
                    Verdict::Fewer => "fewer than expected",
                    Verdict::AsExpected => "as expected",
                    Verdict::More => "more than expected",
                },
                m.singular_series,
                if m.not_counted > 0 {
                    format!("  ({} more not counted: families)", m.not_counted)
                } else {
                    String::new()
                }
            );
        }
        for s in &t.solutions {
            let [a, b, c] = s.to_strings();
            match t.families.iter().find(|f| f.solution == *s) {
                Some(f) => println!("      {a} {b} {c}  [family: {}]", f.description),
                None => println!("      {a} {b} {c}"),
            }
        }
    }
    if v.targets.iter().any(|t| t.model.is_some()) {
        println!(
            "found vs expected: {}; interval: {}.",
            v.model.counting, v.model.interval
        );
    }
}

pub async fn run(a: CampaignArgs) -> Result<()> {
    let c = Client::new(&a)?;
    use reqwest::Method;
    let show = |v: serde_json::Value, json: bool| -> Result<()> {
        if json {
            println!("{}", serde_json::to_string_pretty(&v)?);
        } else {
            let cv: CampaignView = serde_json::from_value(v).context("unreadable campaign")?;
            print_campaign(&cv);
        }
        Ok(())
    };
    match a.command {
        CampaignCommand::Create {
            name,
            ks,
            bound,
            unit_seconds,
            strict,
            json,
        } => {
            let body = CreateCampaign {
                name,
                ks: KList::Text(ks),
                bound: Count::Text(bound),
                unit_seconds: Some(unit_seconds),
                strict,
            };
            let v = c
                .call(
                    Method::POST,
                    "/api/v1/admin/campaigns",
                    Some(serde_json::to_value(body)?),
                )
                .await?;
            show(v, json)
        }
        CampaignCommand::List { json } => {
            let v = c.call(Method::GET, "/api/v1/admin/campaigns", None).await?;
            if json {
                println!("{}", serde_json::to_string_pretty(&v)?);
            } else {
                let cs: Vec<CampaignView> = serde_json::from_value(v)?;
                if cs.is_empty() {
                    println!("no campaigns; create one with `campaign create --name NAME --k K --bound B`");
                }
                for cv in cs {
                    println!(
                        "{:<24} {:<10} bound {:<14} targets {:<4} units {}/{} settled  {:.1}%",
                        cv.name,
                        cv.state,
                        cv.bound,
                        cv.targets.len(),
                        cv.progress.units.settled,
                        cv.progress.units.total,
                        100.0 * cv.progress.fraction
                    );
                }
            }
            Ok(())
        }
        CampaignCommand::Show { name, json } => show(
            c.call(
                Method::GET,
                &format!("/api/v1/admin/campaigns/{name}"),
                None,
            )
            .await?,
            json,
        ),
        CampaignCommand::Pause { name } => show(
            c.call(
                Method::POST,
                &format!("/api/v1/admin/campaigns/{name}/pause"),
                None,
            )
            .await?,
            false,
        ),
        CampaignCommand::Resume { name } => show(
            c.call(
                Method::POST,
                &format!("/api/v1/admin/campaigns/{name}/resume"),
                None,
            )
            .await?,
            false,
        ),
        CampaignCommand::Cancel { name } => show(
            c.call(
                Method::POST,
                &format!("/api/v1/admin/campaigns/{name}/cancel"),
                None,
            )
            .await?,
            false,
        ),
        CampaignCommand::Extend { name, bound, json } => {
            let body = ExtendCampaign {
                bound: Count::Text(bound),
            };
            show(
                c.call(
                    Method::POST,
                    &format!("/api/v1/admin/campaigns/{name}/extend"),
                    Some(serde_json::to_value(body)?),
                )
                .await?,
                json,
            )
        }
    }
}
