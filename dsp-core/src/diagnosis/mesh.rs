//! Gear meshes: the line at the mesh order and its first sidebands at the
//! orders of both meshing shafts, measured in the envelope order spectrum.
//!
//! The mesh order is the tooth count times the order of the shaft carrying
//! the gear (the same as the mate's teeth times the mate's order; common
//! practice). Gears do not slip, so the windows are narrow
//! (`min_window_bins` of the search settings) rather than the bearings' slip
//! window. A local tooth fault modulates the mesh once per turn of the
//! faulty gear: sidebands at `mesh ± that shaft's order` (common practice),
//! so each side of each shaft is measured. A sideband closer to the mesh
//! line than [`MIN_SIDEBAND_BINS`] bins lies on the line's main lobe and is
//! reported not searched.

use crate::diagnosis::defects::{DefectSearch, LineMeasurement};
use crate::spectrum::SpectrumView;

/// Fewest bins between the mesh line and a sideband for the sideband to be
/// searched: the 1.5-bin window beside the line's main lobe (2 bins for Hann).
pub const MIN_SIDEBAND_BINS: f32 = 4.0;

/// One sideband of a mesh line.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Sideband {
    /// Expected order (`mesh ± shaft order`).
    pub order: f32,
    /// Peak amplitude (spectrum units; 0 when none or not searched).
    pub amplitude: f32,
    /// Prominence over the local median floor, dB (-200 when none).
    pub prominence_db: f32,
    /// The window, its floor and the distance from the line were sufficient.
    pub searched: bool,
}

impl Sideband {
    const NONE: Sideband = Sideband {
        order: 0.0,
        amplitude: 0.0,
        prominence_db: -200.0,
        searched: false,
    };
}

/// The first sidebands of one mesh line.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct MeshSidebands {
    /// Spacing (tach orders) of the carrying shaft and of the mate shaft
    /// (0 when the mesh has no mate in the point).
    pub spacing: [f32; 2],
    /// Lower and upper sideband at the carrying shaft's order, then lower
    /// and upper at the mate's.
    pub bands: [Sideband; 4],
}

impl MeshSidebands {
    /// Nothing measured.
    pub const NONE: MeshSidebands = MeshSidebands {
        spacing: [0.0; 2],
        bands: [Sideband::NONE; 4],
    };

    /// The stronger side's prominence at shaft `i` (0 carrying, 1 mate), dB;
    /// `None` when neither side was searched.
    pub fn best_db(&self, i: usize) -> Option<f32> {
        let pair = self.bands.get(2 * i..2 * i + 2)?;
        pair.iter()
            .filter(|b| b.searched)
            .map(|b| b.prominence_db)
            .max_by(f32::total_cmp)
    }
}

/// Measures a mesh line at `order` and its sidebands at `± spacing[i]`
/// (a spacing of 0 is skipped).
///
/// ```
/// use dsp_core::{DefectSearch, DefectSearchConfig};
/// use dsp_core::diagnosis::mesh::measure_mesh;
/// use dsp_core::spectrum::{SpectrumView, Window};
/// let mut amps = [0.01f32; 2048];
/// let opb = 1.0 / 64.0;
/// amps[(10.0f32 / opb) as usize] = 0.5; // mesh at order 10
/// amps[(10.5f32 / opb) as usize] = 0.1; // upper sideband at +0.5 (a faulty gear at 0.5 x)
/// let view = SpectrumView::new(&amps, opb, Window::Hann).unwrap();
/// let s = DefectSearch::new(DefectSearchConfig::default()).unwrap();
/// let (line, sb) = measure_mesh(&s, &view, 10.0, [1.0, 0.5]);
/// assert!(line.searched && (line.prominence_db - 33.98).abs() < 0.1);
/// assert!(sb.bands[3].prominence_db > 19.0); // upper at the mate's 0.5
/// assert!(sb.bands[0].prominence_db < 1.0);  // nothing at 10 - 1
/// ```
pub fn measure_mesh(
    search: &DefectSearch,
    spectrum: &SpectrumView<'_>,
    order: f32,
    spacing: [f32; 2],
) -> (LineMeasurement, MeshSidebands) {
    let opb = spectrum.orders_per_bin();
    let half = search.config().min_window_bins * opb;
    let line = search.measure_line_within(spectrum, order, half);
    let mut sb = MeshSidebands {
        spacing,
        ..MeshSidebands::NONE
    };
    if !line.searched {
        return (line, sb);
    }
    for (i, &s) in spacing.iter().enumerate() {
        if !(s.is_finite() && s >= MIN_SIDEBAND_BINS * opb) {
            continue;
        }
        for (j, sign) in [-1.0f32, 1.0].into_iter().enumerate() {
            let at = order + sign * s;
            let m = search.measure_line_within(spectrum, at, half);
            if let Some(slot) = sb.bands.get_mut(2 * i + j) {
                *slot = Sideband {
                    order: at,
                    amplitude: m.amplitude,
                    prominence_db: m.prominence_db,
                    searched: m.searched,
                };
            }
        }
    }
    (line, sb)
}
