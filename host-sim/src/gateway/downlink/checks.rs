//! The checks of `envord gateway downlink ... config` before anything is
//! written (issue 15, "one configuration"): the report frame the point
//! makes and the slowest EU868 data rate that carries it, the size of the
//! configuration downlink itself, and every watched line the point's
//! setting cannot search (the list of `envord point check`). A point with
//! unsearchable lines, or a downlink longer than the largest EU868 payload,
//! is refused (exit 1, nothing written) unless `--accept-gaps` /
//! `--accept-oversize` says to send it anyway.

use dsp_core::config::PointConfig;

use super::ConfigArgs;
use crate::cmd_analyze::slowest_eu868_rate;
use crate::error::CliError;

/// Largest EU868 application payload at any data rate (DR4 and faster;
/// LoRaWAN Regional Parameters RP002-1.0.x, from memory, as
/// [`slowest_eu868_rate`]).
pub const LARGEST_EU868_PAYLOAD: usize = 222;

/// Prints the report frame size of the point and the lines it cannot
/// search; refuses the point when there is such a line and the gaps were
/// not accepted.
pub fn coverage(point: &PointConfig, c: &ConfigArgs) -> Result<(), CliError> {
    let src = c.point.display();
    let frame = wire::frame::v2::full_frame_len_v2(point.bearings.len(), point.meshes.len());
    eprintln!(
        "{src}: report frame (format 2) {frame} bytes for {} bearing(s) and {} mesh(es); slowest \
         EU868 data rate that carries it: {}",
        point.bearings.len(),
        point.meshes.len(),
        slowest_eu868_rate(frame).unwrap_or("none (over 222 bytes)")
    );
    if frame > LARGEST_EU868_PAYLOAD && !c.accept_oversize {
        return Err(CliError::Difference(format!(
            "{src}: the node's report frame would be {frame} bytes, more than the largest EU868 \
             payload ({LARGEST_EU868_PAYLOAD} bytes); nothing written (watch fewer bearings or \
             meshes, or give --accept-oversize)"
        )));
    }
    let gaps = crate::cmd_point::unsearchable(point);
    for g in &gaps {
        eprintln!("{src}: {g}");
    }
    if !gaps.is_empty() && !c.accept_gaps {
        return Err(CliError::Difference(format!(
            "{src}: {} watched line(s) cannot be searched with this setting (listed above, each \
             with the setting that would); nothing written. Change the point (`envord point \
             check` shows the passes), or give --accept-gaps to send it as it is",
            gaps.len()
        )));
    }
    Ok(())
}

/// Refuses a configuration downlink of `len` bytes longer than one EU868
/// downlink carries, unless accepted. A record is never split into parts:
/// the node applies a configuration whole or not at all, and one signed
/// downlink is one command (docs/frame-format.md "Configuration record").
pub fn size(len: usize, c: &ConfigArgs) -> Result<(), CliError> {
    if len <= LARGEST_EU868_PAYLOAD || c.accept_oversize {
        return Ok(());
    }
    Err(CliError::Difference(format!(
        "{}: the configuration downlink is {len} bytes, more than the largest EU868 payload \
         ({LARGEST_EU868_PAYLOAD} bytes, DR4 and faster), so one downlink cannot carry it and it \
         is not split into parts; nothing written. Shorten the record: watch fewer bearings or \
         meshes, give bearings by geometry (14 bytes each instead of 17), or leave the search \
         settings at their defaults (28 bytes); or give --accept-oversize to write it for \
         another link (e.g. the debug port)",
        c.point.display()
    )))
}
