//! The gateway map: which node and bearing index watch which physical bearing.
//!
//! ```toml
//! [[bearing]]
//! name = "conveyor gearbox, input shaft, drive end"
//! sensors = [{ node = 3, bearing = 0 }, { node = 4, bearing = 1 }]
//! ```

use crate::error::CliError;
use serde::Deserialize;

/// One sensor channel: a node and its bearing index.
#[derive(Clone, Copy, Debug, Deserialize, PartialEq, Eq)]
#[serde(deny_unknown_fields)]
pub struct SensorRef {
    /// Node id.
    pub node: u16,
    /// Bearing index in that node's frames (0..=3).
    pub bearing: u8,
}

/// A physical bearing and the sensors watching it.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PhysicalBearing {
    /// Name shown in views.
    pub name: String,
    /// Sensors watching it.
    pub sensors: Vec<SensorRef>,
}

/// The whole map file.
#[derive(Clone, Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct GatewayMap {
    /// Physical bearings.
    #[serde(default)]
    pub bearing: Vec<PhysicalBearing>,
}

impl GatewayMap {
    /// Parses and validates a map file's text; `source` names it in errors.
    pub fn parse(source: &str, text: &str) -> Result<Self, CliError> {
        let m: GatewayMap = toml::from_str(text).map_err(|e| CliError::input(source, e))?;
        for (i, b) in m.bearing.iter().enumerate() {
            if b.sensors.is_empty() {
                return Err(CliError::input(
                    source,
                    format!("bearing[{i}] {:?}: no sensors", b.name),
                ));
            }
            if let Some(s) = b.sensors.iter().find(|s| s.bearing > 3) {
                return Err(CliError::input(
                    source,
                    format!(
                        "bearing[{i}] {:?}: bearing index {} out of 0..=3",
                        b.name, s.bearing
                    ),
                ));
            }
            if m.bearing.iter().take(i).any(|o| o.name == b.name) {
                return Err(CliError::input(
                    source,
                    format!("bearing[{i}]: duplicate name {:?}", b.name),
                ));
            }
        }
        Ok(m)
    }

    /// Reads and parses a map file.
    pub fn load(path: &str) -> Result<Self, CliError> {
        let text = std::fs::read_to_string(path).map_err(|e| CliError::input(path, e))?;
        Self::parse(path, &text)
    }

    /// Name of the physical bearing a sensor channel watches.
    pub fn name_of(&self, node: u16, bearing: u8) -> Option<&str> {
        self.bearing
            .iter()
            .find(|b| b.sensors.contains(&SensorRef { node, bearing }))
            .map(|b| b.name.as_str())
    }
}
