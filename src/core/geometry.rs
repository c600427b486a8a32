//! Liquid height in a well from the volume pipetted: the optical pathlength of a vertical read in
//! a microplate is the height of the liquid, not 1 cm. The meniscus is ignored (a flat surface is
//! assumed; a real meniscus makes the centre of the well shallower or deeper by an amount that
//! depends on the plastic, the liquid and its surfactants, so the result is an estimate to check
//! against a water-peak read or a standard).
//!
//! Formulas (common practice; ../shared/DOMAIN.md "Signal to concentration"):
//! - cylinder of diameter d: h = V / (pi d^2 / 4);
//! - square well of side s: h = V / s^2;
//! - frustum (a round well widening from bottom diameter d1 to d2 over its depth H): V(h) =
//!   pi h (r1^2 + r1 r(h) + r(h)^2) / 3 with r(h) = r1 + (r2 - r1) h / H, solved for h by
//!   bisection (V(h) rises with h).
//!
//! Units: volume in uL (= mm^3), lengths in mm, pathlength in cm.

use std::f64::consts::PI;
use std::fmt;
use std::str::FromStr;

/// The shape of a well.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum WellShape {
    /// A round, flat-bottomed well of one diameter, mm, and depth, mm.
    Cylinder {
        /// Diameter, mm.
        diameter_mm: f64,
        /// Depth, mm.
        depth_mm: f64,
    },
    /// A square well of one side, mm, and depth, mm.
    Square {
        /// Side, mm.
        side_mm: f64,
        /// Depth, mm.
        depth_mm: f64,
    },
    /// A round well widening from `bottom_mm` to `top_mm` over `depth_mm`.
    Frustum {
        /// Diameter at the bottom, mm.
        bottom_mm: f64,
        /// Diameter at the top, mm.
        top_mm: f64,
        /// Depth, mm.
        depth_mm: f64,
    },
}

/// The named well shapes (`--well-geometry`), with where their dimensions come from. Makers
/// differ: these are typical values, to be replaced by the plate's own drawing (`--well-diameter`).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum WellGeometry {
    /// 96-well, round, standard: 6.35 mm at the bottom widening to 6.86 mm at the top over
    /// 10.67 mm (one maker's drawing quoted in ../shared/reference/trade-facts.txt, a secondary
    /// source; 96-well flat-bottom diameters run 6.35-6.96 mm by maker).
    Round96,
    /// 96-well, half area, round flat bottom: 4.5 mm diameter, 10.5 mm deep (from memory, common
    /// practice; check the maker's drawing).
    HalfArea96,
    /// 384-well, square: 3.7 mm side, 11.5 mm deep (from memory; trade-facts gives 3.3-3.8 mm
    /// by maker, also from memory).
    Square384,
    /// 384-well, round: 3.3 mm diameter, 11.5 mm deep (from memory, common practice).
    Round384,
    /// 1536-well, square: 1.7 mm side, 5.0 mm deep (from memory, common practice).
    Square1536,
}

impl WellGeometry {
    /// Every named shape, in the order they are listed.
    pub const ALL: [WellGeometry; 5] = [
        WellGeometry::Round96,
        WellGeometry::HalfArea96,
        WellGeometry::Square384,
        WellGeometry::Round384,
        WellGeometry::Square1536,
    ];

    /// The name `--well-geometry` takes.
    pub fn name(self) -> &'static str {
        match self {
            WellGeometry::Round96 => "96-round",
            WellGeometry::HalfArea96 => "96-half-area",
            WellGeometry::Square384 => "384-square",
            WellGeometry::Round384 => "384-round",
            WellGeometry::Square1536 => "1536-square",
        }
    }

    /// The shape and dimensions.
    pub fn shape(self) -> WellShape {
        match self {
            WellGeometry::Round96 => WellShape::Frustum {
                bottom_mm: 6.35,
                top_mm: 6.86,
                depth_mm: 10.67,
            },
            WellGeometry::HalfArea96 => WellShape::Cylinder {
                diameter_mm: 4.5,
                depth_mm: 10.5,
            },
            WellGeometry::Square384 => WellShape::Square {
                side_mm: 3.7,
                depth_mm: 11.5,
            },
            WellGeometry::Round384 => WellShape::Cylinder {
                diameter_mm: 3.3,
                depth_mm: 11.5,
            },
            WellGeometry::Square1536 => WellShape::Square {
                side_mm: 1.7,
                depth_mm: 5.0,
            },
        }
    }
}

impl fmt::Display for WellGeometry {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for WellGeometry {
    type Err = String;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        let wanted = text.trim().to_ascii_lowercase();
        WellGeometry::ALL
            .into_iter()
            .find(|geometry| geometry.name() == wanted)
            .ok_or_else(|| {
                format!(
                    "unknown well geometry '{}' (known: {})",
                    text.trim(),
                    WellGeometry::ALL.map(WellGeometry::name).join(", ")
                )
            })
    }
}

impl WellShape {
    /// The well's depth, mm.
    pub fn depth_mm(self) -> f64 {
        match self {
            WellShape::Cylinder { depth_mm, .. }
            | WellShape::Square { depth_mm, .. }
            | WellShape::Frustum { depth_mm, .. } => depth_mm,
        }
    }

    /// The liquid volume that fills the well to height `h` mm, uL.
    pub fn volume_at(self, h: f64) -> f64 {
        match self {
            WellShape::Cylinder { diameter_mm, .. } => PI * diameter_mm * diameter_mm / 4.0 * h,
            WellShape::Square { side_mm, .. } => side_mm * side_mm * h,
            WellShape::Frustum {
                bottom_mm,
                top_mm,
                depth_mm,
            } => {
                let r1 = bottom_mm / 2.0;
                let r = r1 + (top_mm - bottom_mm) / 2.0 * h / depth_mm;
                PI * h * (r1 * r1 + r1 * r + r * r) / 3.0
            }
        }
    }

    /// The well's capacity (filled to the brim), uL.
    pub fn capacity_ul(self) -> f64 {
        self.volume_at(self.depth_mm())
    }

    /// The liquid height of `volume_ul`, cm; `Err` names the capacity when the volume does not fit.
    pub fn pathlength_cm(self, volume_ul: f64) -> Result<f64, String> {
        let capacity = self.capacity_ul();
        if volume_ul > capacity {
            return Err(format!(
                "volume {volume_ul} uL is more than the well holds ({:.0} uL to the brim)",
                capacity
            ));
        }
        let height_mm = match self {
            WellShape::Cylinder { diameter_mm, .. } => volume_ul / (PI * diameter_mm * diameter_mm / 4.0),
            WellShape::Square { side_mm, .. } => volume_ul / (side_mm * side_mm),
            WellShape::Frustum { depth_mm, .. } => {
                // Bisection: V(h) rises with h; 200 halvings are far below any tolerance needed.
                let (mut low, mut high) = (0.0, depth_mm);
                for _ in 0..200 {
                    let middle = 0.5 * (low + high);
                    if self.volume_at(middle) < volume_ul {
                        low = middle;
                    } else {
                        high = middle;
                    }
                }
                0.5 * (low + high)
            }
        };
        Ok(height_mm / 10.0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    /// Hand calculation (cylinder h = V / (pi r^2)), as in ../shared/reference/trade-facts.txt:
    /// 200 uL gives 0.632 cm at d = 6.35 mm and 0.541 cm at d = 6.86 mm. By hand: pi (3.175)^2 =
    /// 31.669 mm^2, 200 / 31.669 = 6.3153 mm; pi (3.43)^2 = 36.961 mm^2, 200 / 36.961 = 5.4111 mm.
    #[test]
    fn a_cylinder_matches_the_hand_calculation() {
        let narrow = WellShape::Cylinder {
            diameter_mm: 6.35,
            depth_mm: 11.0,
        };
        assert_relative_eq!(narrow.pathlength_cm(200.0).unwrap(), 0.63153, max_relative = 1e-4);
        let wide = WellShape::Cylinder {
            diameter_mm: 6.86,
            depth_mm: 11.0,
        };
        assert_relative_eq!(wide.pathlength_cm(200.0).unwrap(), 0.54111, max_relative = 1e-4);
        let square = WellShape::Square {
            side_mm: 2.0,
            depth_mm: 10.0,
        };
        assert_relative_eq!(square.pathlength_cm(20.0).unwrap(), 0.5, max_relative = 1e-12);
    }

    /// The frustum 6.35 -> 6.86 mm over 10.67 mm holding 200 uL stands 0.604 cm high
    /// (../shared/reference/trade-facts.txt, computed from the frustum formula); checked here
    /// by putting the height back into V(h) by hand: h = 6.04 mm, r(h) = 3.175 + 0.255 x 6.04 /
    /// 10.67 = 3.31935, V = pi 6.04 (10.0806 + 10.5389 + 11.0181) / 3 = 200.1 uL.
    #[test]
    fn a_frustum_matches_the_hand_calculation() {
        let well = WellGeometry::Round96.shape();
        let path = well.pathlength_cm(200.0).unwrap();
        assert!((path - 0.604).abs() < 0.0006, "{path}");
        assert_relative_eq!(well.volume_at(6.04), 200.1, max_relative = 1e-3);
    }

    #[test]
    fn a_volume_larger_than_the_well_is_refused_and_names_parse() {
        let message = WellGeometry::Square1536.shape().pathlength_cm(50.0).unwrap_err();
        assert!(message.contains("more than the well holds"), "{message}");
        assert_eq!(
            "96-Half-Area".parse::<WellGeometry>(),
            Ok(WellGeometry::HalfArea96)
        );
        assert!("96-deep"
            .parse::<WellGeometry>()
            .unwrap_err()
            .contains("384-square"));
    }
}
