//! `envord point check`: every watched line of a measuring point that its
//! setting cannot search, with the reason and the setting that would, so a
//! point is fixed before it is sent to a node (issue 15). `analyze` prints
//! the same list as cautions.
//!
//! Checked: every bearing (its passes, [`dsp_core::coverage`]), every gear
//! mesh line (its order below the first pass's search limit `S/4`) and its
//! sidebands (at least [`dsp_core::diagnosis::mesh::MIN_SIDEBAND_BINS`] bins from the
//! line at the first pass's resolution `S/N`).

use std::path::PathBuf;

use dsp_core::config::PointConfig;
use dsp_core::diagnosis::coverage::{gaps, plan};
use dsp_core::diagnosis::mesh::MIN_SIDEBAND_BINS;
use dsp_core::pipeline::NodePipeline;

use crate::error::CliError;

/// Spectrum size of the node (`NodePipeline`).
const N: usize = 4096;

/// `envord point ...`.
#[derive(clap::Args, Debug)]
pub struct PointArgs {
    /// The subcommand.
    #[command(subcommand)]
    pub command: PointCommand,
}

/// Subcommands of `envord point`.
#[derive(clap::Subcommand, Debug)]
pub enum PointCommand {
    /// List every watched line this point cannot search, with the reason
    /// and the setting that would; exit 1 when there is one.
    Check(CheckArgs),
}

/// `envord point check`.
#[derive(clap::Args, Debug)]
pub struct CheckArgs {
    /// Measuring point (TOML point file).
    pub point: PathBuf,
    /// Tach-shaft speed, rpm, for the record length in seconds (default:
    /// the point's max_rpm, the shortest record).
    #[arg(long)]
    pub rpm: Option<f32>,
}

/// Every watched line of `point` that it cannot search, one sentence each
/// (empty: every line is searched).
pub fn unsearchable(point: &PointConfig) -> Vec<String> {
    let mut out = Vec::new();
    for g in gaps(point, N) {
        let name = point
            .bearings
            .get(usize::from(g.bearing))
            .map_or_else(|| format!("#{}", g.bearing), |b| b.name.to_string());
        out.push(format!(
            "bearing {name} {}: not searched: {}",
            g.kind.name(),
            g.reason
        ));
    }
    let s0 = point.samples_per_rev;
    let opb = f32::from(s0) / N as f32;
    let ratio = |i: u8| point.shafts.get(usize::from(i)).map(|s| s.ratio);
    let shaft_name = |i: u8| {
        point
            .shafts
            .get(usize::from(i))
            .map_or_else(|| format!("#{i}"), |s| s.name.to_string())
    };
    for m in &point.meshes {
        let Some(r) = ratio(m.shaft) else { continue };
        let order = f32::from(m.teeth) * r;
        // The line, its upper sideband and the window's guard must fit.
        let top = order + r.max(m.mate.and_then(ratio).unwrap_or(0.0)) + 4.0 * opb;
        if top > search_limit(s0) {
            // The smallest power of two S with S/4 >= top.
            let mut needed = 8u32;
            while (needed as f32) < 4.0 * top && needed < 65_536 {
                needed *= 2;
            }
            out.push(format!(
                "mesh {} (order {order:.3}): not searched: above the search range {:.1} at \
                 samples_per_rev = {s0}; samples_per_rev = {needed} would reach it",
                m.name,
                search_limit(s0)
            ));
            continue;
        }
        for (which, sh) in [("shaft", Some(m.shaft)), ("mate", m.mate)] {
            let Some(sh) = sh else { continue };
            let Some(sp) = ratio(sh) else { continue };
            if sp < MIN_SIDEBAND_BINS * opb {
                // Resolution S/N: S <= sp x N / 4 would resolve it.
                let max_s = (sp * N as f32 / MIN_SIDEBAND_BINS).floor();
                let fix = if order + sp + 4.0 * sp / MIN_SIDEBAND_BINS <= 0.25 * max_s {
                    format!("samples_per_rev = {} would resolve it", prev_pow2(max_s))
                } else {
                    "no single samples_per_rev resolves it within the search range (4096-point \
                     spectrum); watch the mesh from a point on a slower tach"
                        .to_string()
                };
                out.push(format!(
                    "mesh {} sidebands at the {which} shaft {} (+-{sp:.4} orders, {:.1} bins): not \
                     searched: closer to the mesh line than {MIN_SIDEBAND_BINS} bins; {fix}",
                    m.name,
                    shaft_name(sh),
                    sp / opb
                ));
            }
        }
    }
    out
}

/// Highest order a pass at `s` searches (`S / 4`, as `dsp_core::coverage`).
fn search_limit(s: u16) -> f32 {
    0.25 * f32::from(s)
}

fn prev_pow2(x: f32) -> u32 {
    let mut p = 8u32;
    while (2 * p) as f32 <= x && p < 1024 {
        p *= 2;
    }
    p
}

/// Runs `envord point check`.
pub fn run_cmd(args: &PointArgs) -> Result<(), CliError> {
    let PointCommand::Check(a) = &args.command;
    let point = crate::point::load(&a.point)?;
    if let Err(e) = NodePipeline::check(&point) {
        return Err(CliError::input(
            a.point.display(),
            crate::analysis::explain_pipeline_error(&point, e),
        ));
    }
    let c = plan(&point, N);
    let rpm = a.rpm.unwrap_or(point.max_rpm);
    if !(rpm.is_finite() && rpm > 0.0) {
        return Err(CliError::input(
            "--rpm",
            format!("{rpm} is not a positive speed; give the tach-shaft speed in rpm"),
        ));
    }
    let revs: f32 = c.passes.iter().map(|p| f32::from(p.revolutions)).sum();
    println!(
        "point {}: {} bearing(s), {} mesh(es), {} pass(es), {revs:.0} tach revolutions \
         ({:.1} s at {rpm:.0} rpm)",
        a.point.display(),
        point.bearings.len(),
        point.meshes.len(),
        c.passes.len(),
        revs * 60.0 / rpm
    );
    for (i, p) in c.passes.iter().enumerate() {
        let served: Vec<String> = point
            .bearings
            .iter()
            .zip(&c.bearings)
            .filter(|(_, r)| **r == Ok(u8::try_from(i).unwrap_or(u8::MAX)))
            .map(|(b, _)| b.name.to_string())
            .collect();
        println!(
            "pass {i}: samples_per_rev {}, {} revolutions, {:.4} orders/bin, searched to order \
             {:.1}: {}",
            p.samples_per_rev,
            p.revolutions,
            f32::from(p.samples_per_rev) / N as f32,
            search_limit(p.samples_per_rev),
            if served.is_empty() {
                "(meshes only)".to_string()
            } else {
                served.join(", ")
            }
        );
    }
    let list = unsearchable(&point);
    if list.is_empty() {
        println!("every watched line is searched");
        return Ok(());
    }
    for l in &list {
        println!("{l}");
    }
    Err(CliError::Difference(format!(
        "{}: {} watched line(s) cannot be searched with this setting (listed above)",
        a.point.display(),
        list.len()
    )))
}
