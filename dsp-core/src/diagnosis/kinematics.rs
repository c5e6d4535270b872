//! Bearing kinematics: defect frequencies as orders of the tach shaft.
//!
//! The classical rigid-body formulas (pure rolling, no slip) give each defect
//! frequency as a multiple of the speed of the shaft the bearing sits on, with
//! `r = d/D · cos(α)` (roller diameter `d`, pitch diameter `D`, contact angle
//! `α`, `n` rollers):
//!
//! ```text
//! FTF  = 1/2 · (1 - r)          cage
//! BPFO = n/2 · (1 - r)          outer-race defect
//! BPFI = n/2 · (1 + r)          inner-race defect
//! BSF  = D/(2d) · (1 - r²)      roller spin
//! ```
//!
//! A rolling-element defect strikes both races once per spin revolution, so
//! its envelope line is watched at **2 × BSF** (common practice); it is
//! reported under [`DefectKind::Bsf`].
//!
//! Bearings on other shafts than the tach shaft are handled through a
//! [`Drivetrain`]: each shaft has a speed ratio to the tach shaft (given
//! directly or from gear tooth counts), and a bearing's line orders are its
//! multiples times that ratio.

use core::fmt;

/// The four classical bearing defect frequencies (serialised in lower case,
/// as the frame's JSON form uses them).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum DefectKind {
    /// Ball pass frequency, outer race.
    Bpfo,
    /// Ball pass frequency, inner race.
    Bpfi,
    /// Fundamental train (cage) frequency.
    Ftf,
    /// Ball (roller) spin frequency; the watched line is 2 × BSF.
    Bsf,
}

impl DefectKind {
    /// All kinds in index order.
    pub const ALL: [DefectKind; 4] = [
        DefectKind::Bpfo,
        DefectKind::Bpfi,
        DefectKind::Ftf,
        DefectKind::Bsf,
    ];

    /// Trade name: "BPFO", "BPFI", "FTF", "BSF".
    pub const fn name(self) -> &'static str {
        match self {
            DefectKind::Bpfo => "BPFO",
            DefectKind::Bpfi => "BPFI",
            DefectKind::Ftf => "FTF",
            DefectKind::Bsf => "BSF",
        }
    }

    /// Index 0..=3 (BPFO, BPFI, FTF, BSF), for fixed arrays and frames.
    pub const fn index(self) -> usize {
        match self {
            DefectKind::Bpfo => 0,
            DefectKind::Bpfi => 1,
            DefectKind::Ftf => 2,
            DefectKind::Bsf => 3,
        }
    }

    /// Inverse of [`DefectKind::index`].
    pub const fn from_index(i: usize) -> Option<DefectKind> {
        match i {
            0 => Some(DefectKind::Bpfo),
            1 => Some(DefectKind::Bpfi),
            2 => Some(DefectKind::Ftf),
            3 => Some(DefectKind::Bsf),
            _ => None,
        }
    }
}

impl fmt::Display for DefectKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Error of [`BearingGeometry::multiples`] and [`DefectMultiples::new`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum GeometryError {
    /// A value is NaN or infinite.
    NonFinite,
    /// Fewer than one rolling element.
    NoRollers,
    /// Roller diameter not in `0 < d < D`.
    RollerDiameter,
    /// Contact angle not in `0 <= α < 90` degrees.
    ContactAngle,
    /// A directly given multiple is not positive.
    NonPositiveMultiple,
}

impl fmt::Display for GeometryError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            GeometryError::NonFinite => "bearing geometry value is not finite",
            GeometryError::NoRollers => "bearing needs at least one rolling element",
            GeometryError::RollerDiameter => "roller diameter must satisfy 0 < d < pitch diameter",
            GeometryError::ContactAngle => "contact angle must satisfy 0 <= angle < 90 degrees",
            GeometryError::NonPositiveMultiple => "defect multiples must be positive",
        })
    }
}

impl core::error::Error for GeometryError {}

/// Rolling-element bearing geometry. Diameters in any one consistent unit.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct BearingGeometry {
    /// Number of rolling elements.
    pub rollers: u16,
    /// Rolling-element diameter `d`.
    pub roller_diameter: f32,
    /// Pitch diameter `D`.
    pub pitch_diameter: f32,
    /// Contact angle in degrees.
    pub contact_angle_deg: f32,
}

impl BearingGeometry {
    /// Defect frequencies as multiples of the bearing shaft's speed.
    ///
    /// Computed in `f64` (soft-float on the node, done once at configuration).
    ///
    /// ```
    /// use dsp_core::diagnosis::kinematics::BearingGeometry;
    /// // Deep-groove bearing of an invented conveyor idler.
    /// let g = BearingGeometry { rollers: 8, roller_diameter: 7.9, pitch_diameter: 33.5, contact_angle_deg: 0.0 };
    /// let m = g.multiples().unwrap();
    /// assert!((m.bpfo() + m.bpfi() - 8.0).abs() < 1e-4);
    /// ```
    pub fn multiples(&self) -> Result<DefectMultiples, GeometryError> {
        let (d, pd, a) = (
            f64::from(self.roller_diameter),
            f64::from(self.pitch_diameter),
            f64::from(self.contact_angle_deg),
        );
        if !(d.is_finite() && pd.is_finite() && a.is_finite()) {
            return Err(GeometryError::NonFinite);
        }
        if self.rollers == 0 {
            return Err(GeometryError::NoRollers);
        }
        if !(d > 0.0 && d < pd) {
            return Err(GeometryError::RollerDiameter);
        }
        if !(0.0..90.0).contains(&a) {
            return Err(GeometryError::ContactAngle);
        }
        let n = f64::from(self.rollers);
        let r = d / pd * libm::cos(a.to_radians());
        let ftf = 0.5 * (1.0 - r);
        let bpfo = n * 0.5 * (1.0 - r);
        let bpfi = n * 0.5 * (1.0 + r);
        let bsf = pd / (2.0 * d) * (1.0 - r * r);
        Ok(DefectMultiples {
            ftf: crate::num::f64_to_f32(ftf),
            bpfo: crate::num::f64_to_f32(bpfo),
            bpfi: crate::num::f64_to_f32(bpfi),
            bsf: crate::num::f64_to_f32(bsf),
        })
    }
}

/// Defect frequencies as multiples of the bearing shaft's speed (validated:
/// finite and positive).
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DefectMultiples {
    ftf: f32,
    bpfo: f32,
    bpfi: f32,
    bsf: f32,
}

impl DefectMultiples {
    /// From published multiples (some datasets give only these). `bsf` is
    /// **one** times the spin frequency; a table that lists the
    /// "rolling element" frequency as 2 × BSF must be halved first.
    pub fn new(bpfo: f32, bpfi: f32, ftf: f32, bsf: f32) -> Result<Self, GeometryError> {
        let all = [bpfo, bpfi, ftf, bsf];
        if all.iter().any(|v| !v.is_finite()) {
            return Err(GeometryError::NonFinite);
        }
        if all.iter().any(|&v| v <= 0.0) {
            return Err(GeometryError::NonPositiveMultiple);
        }
        Ok(Self {
            ftf,
            bpfo,
            bpfi,
            bsf,
        })
    }

    /// Cage frequency multiple.
    pub fn ftf(&self) -> f32 {
        self.ftf
    }
    /// Outer-race multiple.
    pub fn bpfo(&self) -> f32 {
        self.bpfo
    }
    /// Inner-race multiple.
    pub fn bpfi(&self) -> f32 {
        self.bpfi
    }
    /// Roller spin multiple (1 × BSF).
    pub fn bsf(&self) -> f32 {
        self.bsf
    }

    /// The multiple watched in the envelope spectrum for `kind`
    /// (2 × BSF for [`DefectKind::Bsf`]).
    pub fn watched(&self, kind: DefectKind) -> f32 {
        match kind {
            DefectKind::Bpfo => self.bpfo,
            DefectKind::Bpfi => self.bpfi,
            DefectKind::Ftf => self.ftf,
            DefectKind::Bsf => 2.0 * self.bsf,
        }
    }

    /// Line orders relative to the tach shaft for a bearing on a shaft that
    /// turns at `shaft_ratio` × the tach shaft speed.
    pub fn orders(&self, shaft_ratio: ShaftRatio) -> BearingOrders {
        let r = shaft_ratio.get();
        BearingOrders {
            lines: DefectKind::ALL.map(|k| self.watched(k) * r),
            shaft_order: r,
            ftf_order: self.ftf * r,
        }
    }
}

/// Speed of a shaft relative to the tach shaft (finite, positive).
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ShaftRatio(f32);

/// Error of shaft and gear definitions.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum DrivetrainError {
    /// Ratio not finite and positive.
    InvalidRatio,
    /// A gear has zero teeth.
    ZeroTeeth,
    /// The referenced shaft does not exist.
    UnknownShaft,
    /// The fixed capacity is exhausted.
    Full,
}

impl fmt::Display for DrivetrainError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            DrivetrainError::InvalidRatio => "shaft ratio must be finite and positive",
            DrivetrainError::ZeroTeeth => "gear tooth count must be at least one",
            DrivetrainError::UnknownShaft => "no such shaft",
            DrivetrainError::Full => "drivetrain capacity exhausted",
        })
    }
}

impl core::error::Error for DrivetrainError {}

impl ShaftRatio {
    /// The tach shaft itself.
    pub const TACH: ShaftRatio = ShaftRatio(1.0);

    /// A ratio, validated finite and positive.
    pub fn new(ratio: f32) -> Result<Self, DrivetrainError> {
        if ratio.is_finite() && ratio > 0.0 {
            Ok(Self(ratio))
        } else {
            Err(DrivetrainError::InvalidRatio)
        }
    }

    /// The ratio of the shaft driven through a mesh from a shaft at `self`:
    /// `self × z_driver / z_driven`.
    pub fn through_mesh(
        self,
        driver_teeth: u16,
        driven_teeth: u16,
    ) -> Result<Self, DrivetrainError> {
        if driver_teeth == 0 || driven_teeth == 0 {
            return Err(DrivetrainError::ZeroTeeth);
        }
        Self::new(self.0 * f32::from(driver_teeth) / f32::from(driven_teeth))
    }

    /// The ratio value.
    pub fn get(self) -> f32 {
        self.0
    }
}

/// Index of a shaft inside a [`Drivetrain`] (0 is the tach shaft).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ShaftId(pub u8);

/// One gear mesh between two shafts of a drivetrain.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct GearMesh {
    /// Driving shaft.
    pub driver: ShaftId,
    /// Driven shaft.
    pub driven: ShaftId,
    /// Teeth on the driving gear.
    pub driver_teeth: u16,
    /// Teeth on the driven gear.
    pub driven_teeth: u16,
    /// Mesh order relative to the tach shaft (teeth × shaft ratio).
    pub mesh_order: f32,
}

/// Shafts with speed ratios to the tach shaft, built from direct ratios or
/// chained gear meshes. Fixed capacity `S` shafts (including the tach shaft).
///
/// ```
/// use dsp_core::diagnosis::kinematics::{Drivetrain, ShaftId};
/// // Invented two-stage reducer: 21/84 then 17/68 teeth.
/// let mut t: Drivetrain<4> = Drivetrain::new();
/// let mid = t.add_mesh(ShaftId(0), 21, 84).unwrap();
/// let out = t.add_mesh(mid, 17, 68).unwrap();
/// assert!((t.ratio(out).unwrap().get() - 1.0 / 16.0).abs() < 1e-6);
/// assert!((t.meshes()[0].mesh_order - 21.0).abs() < 1e-6);
/// ```
#[derive(Debug, Clone)]
pub struct Drivetrain<const S: usize> {
    shafts: heapless::Vec<ShaftRatio, S>,
    meshes: heapless::Vec<GearMesh, S>,
}

impl<const S: usize> Default for Drivetrain<S> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const S: usize> Drivetrain<S> {
    /// A drivetrain holding only the tach shaft (`ShaftId(0)`, ratio 1).
    /// With `S == 0` it is empty and every lookup fails.
    pub fn new() -> Self {
        let mut shafts = heapless::Vec::new();
        // Capacity 0 leaves it empty; lookups then report UnknownShaft.
        let _ = shafts.push(ShaftRatio::TACH);
        Self {
            shafts,
            meshes: heapless::Vec::new(),
        }
    }

    /// Adds a shaft with a directly known ratio to the tach shaft.
    pub fn add_shaft(&mut self, ratio: ShaftRatio) -> Result<ShaftId, DrivetrainError> {
        let id = u8::try_from(self.shafts.len()).map_err(|_| DrivetrainError::Full)?;
        self.shafts.push(ratio).map_err(|_| DrivetrainError::Full)?;
        Ok(ShaftId(id))
    }

    /// Adds the shaft driven from `driver` through a mesh
    /// (ratio = driver ratio × z_driver / z_driven) and records the mesh.
    pub fn add_mesh(
        &mut self,
        driver: ShaftId,
        driver_teeth: u16,
        driven_teeth: u16,
    ) -> Result<ShaftId, DrivetrainError> {
        let from = self.ratio(driver)?;
        let ratio = from.through_mesh(driver_teeth, driven_teeth)?;
        if self.meshes.is_full() || self.shafts.is_full() {
            return Err(DrivetrainError::Full);
        }
        let driven = self.add_shaft(ratio)?;
        let mesh = GearMesh {
            driver,
            driven,
            driver_teeth,
            driven_teeth,
            mesh_order: f32::from(driver_teeth) * from.get(),
        };
        self.meshes.push(mesh).map_err(|_| DrivetrainError::Full)?;
        Ok(driven)
    }

    /// Ratio of a shaft to the tach shaft.
    pub fn ratio(&self, id: ShaftId) -> Result<ShaftRatio, DrivetrainError> {
        self.shafts
            .get(usize::from(id.0))
            .copied()
            .ok_or(DrivetrainError::UnknownShaft)
    }

    /// Recorded gear meshes (their mesh orders are optional watched lines).
    pub fn meshes(&self) -> &[GearMesh] {
        &self.meshes
    }

    /// Line orders of a bearing sitting on shaft `id`.
    pub fn bearing_orders(
        &self,
        id: ShaftId,
        multiples: &DefectMultiples,
    ) -> Result<BearingOrders, DrivetrainError> {
        Ok(multiples.orders(self.ratio(id)?))
    }
}

/// A bearing's watched lines as orders of the tach shaft.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct BearingOrders {
    lines: [f32; 4],
    shaft_order: f32,
    ftf_order: f32,
}

impl BearingOrders {
    /// Watched line order of `kind` (2 × BSF for [`DefectKind::Bsf`]).
    pub fn line(&self, kind: DefectKind) -> f32 {
        self.lines.get(kind.index()).copied().unwrap_or(0.0)
    }

    /// All four lines in [`DefectKind::index`] order.
    pub fn lines(&self) -> [f32; 4] {
        self.lines
    }

    /// Order of the bearing's own shaft (BPFI sideband spacing).
    pub fn shaft_order(&self) -> f32 {
        self.shaft_order
    }

    /// Cage order (sideband spacing of the rolling-element line).
    pub fn ftf_order(&self) -> f32 {
        self.ftf_order
    }

    /// Line frequencies in Hz for a tach shaft turning at `tach_hz`.
    pub fn frequencies_hz(&self, tach_hz: f32) -> [f32; 4] {
        self.lines.map(|o| o * tach_hz)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn invalid_geometry_is_typed() {
        let ok = BearingGeometry {
            rollers: 9,
            roller_diameter: 0.3126,
            pitch_diameter: 1.537,
            contact_angle_deg: 0.0,
        };
        assert!(ok.multiples().is_ok());
        let mut g = ok;
        g.rollers = 0;
        assert_eq!(g.multiples(), Err(GeometryError::NoRollers));
        let mut g = ok;
        g.roller_diameter = 2.0;
        assert_eq!(g.multiples(), Err(GeometryError::RollerDiameter));
        let mut g = ok;
        g.contact_angle_deg = 90.0;
        assert_eq!(g.multiples(), Err(GeometryError::ContactAngle));
        let mut g = ok;
        g.pitch_diameter = f32::NAN;
        assert_eq!(g.multiples(), Err(GeometryError::NonFinite));
    }

    #[test]
    fn kinds_round_trip() {
        for k in DefectKind::ALL {
            assert_eq!(DefectKind::from_index(k.index()), Some(k));
        }
        assert_eq!(DefectKind::Bsf.name(), "BSF");
    }
}
