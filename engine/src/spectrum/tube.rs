//! The tube description a deck or the command line gives: voltage, anode, filtration, ripple.

use serde::{Deserialize, Serialize};
use std::fmt;
use std::str::FromStr;

use super::SpectrumError;

/// Lowest tube voltage accepted (kV).
pub const KVP_MIN: f64 = 15.0;
/// Highest tube voltage accepted (kV).
pub const KVP_MAX: f64 = 300.0;
/// Accepted anode angles (degrees).
pub const ANODE_ANGLE_RANGE_DEG: (f64, f64) = (3.0, 45.0);
/// Accepted voltage ripple (percent).
pub const RIPPLE_RANGE_PERCENT: (f64, f64) = (0.0, 50.0);
/// Largest thickness accepted for one filter layer (mm).
pub const FILTER_MAX_MM: f64 = 100.0;

/// Anode (target) element.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub enum Anode {
    /// Tungsten (Z = 74): general radiography, CT, orthovoltage.
    W,
    /// Molybdenum (Z = 42): mammography.
    Mo,
    /// Rhodium (Z = 45): mammography.
    Rh,
}

impl Anode {
    /// Every supported anode.
    pub const ALL: [Anode; 3] = [Anode::W, Anode::Mo, Anode::Rh];

    /// Chemical symbol.
    pub fn symbol(self) -> &'static str {
        match self {
            Anode::W => "W",
            Anode::Mo => "Mo",
            Anode::Rh => "Rh",
        }
    }

    /// Mean excitation energy I (keV) for the Bethe stopping power.
    /// Source: ICRU Report 37 (1984), Table 2.8 (from memory): W 727 eV, Mo 424 eV, Rh 449 eV.
    pub fn mean_excitation_kev(self) -> f64 {
        match self {
            Anode::W => 0.727,
            Anode::Mo => 0.424,
            Anode::Rh => 0.449,
        }
    }

    /// Inherent filtration assumed when a deck or the command line gives none.
    ///
    /// Common practice, not a standard: a general-radiography tungsten tube housing (glass, oil,
    /// port) is about 1 mm Al equivalent; a mammography tube has a beryllium window of about
    /// 1 mm and nothing else.
    pub fn default_inherent(self) -> InherentFiltration {
        match self {
            Anode::W => InherentFiltration { be_window_mm: 0.0, al_equivalent_mm: 1.0 },
            Anode::Mo | Anode::Rh => InherentFiltration { be_window_mm: 1.0, al_equivalent_mm: 0.0 },
        }
    }
}

impl fmt::Display for Anode {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.symbol())
    }
}

impl FromStr for Anode {
    type Err = SpectrumError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Anode::ALL
            .into_iter()
            .find(|a| a.symbol().eq_ignore_ascii_case(s.trim()))
            .ok_or_else(|| SpectrumError::UnknownAnode(s.to_string()))
    }
}

/// Filtration built into the tube: a beryllium window and an aluminium-equivalent rest.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct InherentFiltration {
    /// Beryllium window thickness (mm).
    pub be_window_mm: f64,
    /// Aluminium equivalent of glass envelope, oil and port (mm).
    pub al_equivalent_mm: f64,
}

/// One layer of added filtration. In a deck either a table `{ material = "Al", thickness_mm = 2.5 }`
/// or the short form `"Al:2.5"`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "FilterRepr")]
pub struct Filter {
    /// Material name as the materials library knows it ("Al", "Cu", "Mo", "water", …).
    pub material: String,
    /// Thickness (mm).
    pub thickness_mm: f64,
}

/// The two deck forms of a filter.
#[derive(Deserialize)]
#[serde(untagged)]
enum FilterRepr {
    Spec(String),
    Table(FilterTable),
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FilterTable {
    material: String,
    thickness_mm: f64,
}

impl TryFrom<FilterRepr> for Filter {
    type Error = SpectrumError;
    fn try_from(r: FilterRepr) -> Result<Self, Self::Error> {
        match r {
            FilterRepr::Spec(s) => s.parse(),
            FilterRepr::Table(t) => {
                let f = Filter { material: t.material, thickness_mm: t.thickness_mm };
                f.validate()?;
                Ok(f)
            }
        }
    }
}

impl FromStr for Filter {
    type Err = SpectrumError;
    /// Parses `material:thickness_mm`, e.g. `Al:2.5`.
    fn from_str(spec: &str) -> Result<Self, Self::Err> {
        let bad = |reason: &str| SpectrumError::BadFilterSpec {
            spec: spec.to_string(),
            reason: reason.to_string(),
        };
        let (material, thickness) = spec
            .split_once(':')
            .ok_or_else(|| bad("expected `material:thickness_mm`, e.g. `Al:2.5`"))?;
        let material = material.trim();
        if material.is_empty() {
            return Err(bad("the material name is empty; write e.g. `Al:2.5`"));
        }
        let thickness_mm: f64 = thickness
            .trim()
            .parse()
            .map_err(|_| bad("the thickness is not a number of millimetres; write e.g. `Al:2.5`"))?;
        let f = Filter { material: material.to_string(), thickness_mm };
        f.validate()?;
        Ok(f)
    }
}

impl Filter {
    /// Checks the thickness is finite and within 0–`FILTER_MAX_MM`.
    pub fn validate(&self) -> Result<(), SpectrumError> {
        if !self.thickness_mm.is_finite() || self.thickness_mm < 0.0 || self.thickness_mm > FILTER_MAX_MM {
            return Err(SpectrumError::FilterThickness {
                material: self.material.clone(),
                thickness_mm: self.thickness_mm,
            });
        }
        Ok(())
    }
}

fn default_anode_angle_deg() -> f64 {
    12.0
}

/// An x-ray tube setting: what a deck's source section deserializes into.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Tube {
    /// Peak tube voltage (kV); the Duane–Hunt limit is kvp keV.
    pub kvp: f64,
    /// Anode element.
    pub anode: Anode,
    /// Anode angle between the target face and the central ray (degrees); default 12.
    #[serde(default = "default_anode_angle_deg")]
    pub anode_angle_deg: f64,
    /// Added filters, in beam order.
    #[serde(default)]
    pub filters: Vec<Filter>,
    /// Voltage ripple (Vmax − Vmin)/Vmax in percent; 0 = constant potential.
    #[serde(default)]
    pub ripple_percent: f64,
    /// Inherent filtration; `None` takes [`Anode::default_inherent`].
    #[serde(default)]
    pub inherent: Option<InherentFiltration>,
}

impl Tube {
    /// A constant-potential tube with the default angle and inherent filtration and no added filter.
    pub fn new(kvp: f64, anode: Anode) -> Self {
        Tube {
            kvp,
            anode,
            anode_angle_deg: default_anode_angle_deg(),
            filters: Vec::new(),
            ripple_percent: 0.0,
            inherent: None,
        }
    }

    /// Adds a filter layer (builder style).
    pub fn with_filter(mut self, material: &str, thickness_mm: f64) -> Self {
        self.filters.push(Filter { material: material.to_string(), thickness_mm });
        self
    }

    /// The inherent filtration in use.
    pub fn inherent_filtration(&self) -> InherentFiltration {
        self.inherent.unwrap_or_else(|| self.anode.default_inherent())
    }

    /// Checks every value against its valid range (no data access).
    pub fn validate(&self) -> Result<(), SpectrumError> {
        if !(self.kvp.is_finite() && (KVP_MIN..=KVP_MAX).contains(&self.kvp)) {
            return Err(SpectrumError::KvpOutOfRange(self.kvp));
        }
        let (a0, a1) = ANODE_ANGLE_RANGE_DEG;
        if !(self.anode_angle_deg.is_finite() && (a0..=a1).contains(&self.anode_angle_deg)) {
            return Err(SpectrumError::AnodeAngleOutOfRange(self.anode_angle_deg));
        }
        let (r0, r1) = RIPPLE_RANGE_PERCENT;
        if !(self.ripple_percent.is_finite() && (r0..=r1).contains(&self.ripple_percent)) {
            return Err(SpectrumError::RippleOutOfRange(self.ripple_percent));
        }
        for f in &self.filters {
            f.validate()?;
        }
        let inh = self.inherent_filtration();
        for (name, t) in [("Be window", inh.be_window_mm), ("Al equivalent", inh.al_equivalent_mm)] {
            if !t.is_finite() || !(0.0..=FILTER_MAX_MM).contains(&t) {
                return Err(SpectrumError::FilterThickness { material: format!("inherent {name}"), thickness_mm: t });
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn filter_specs_parse_and_reject() {
        let f: Filter = "Cu:0.1".parse().unwrap();
        assert_eq!(f, Filter { material: "Cu".into(), thickness_mm: 0.1 });
        assert!(matches!("Al".parse::<Filter>(), Err(SpectrumError::BadFilterSpec { .. })));
        assert!(matches!("Al:abc".parse::<Filter>(), Err(SpectrumError::BadFilterSpec { .. })));
        assert!(matches!(":2".parse::<Filter>(), Err(SpectrumError::BadFilterSpec { .. })));
        assert!(matches!("Al:-1".parse::<Filter>(), Err(SpectrumError::FilterThickness { .. })));
    }

    #[test]
    fn tube_deserializes_from_toml_with_defaults() {
        let t: Tube = toml::from_str("kvp = 80\nanode = \"W\"\nfilters = [{ material = \"Al\", thickness_mm = 2.5 }]").unwrap();
        assert_eq!(t.anode_angle_deg, 12.0);
        assert_eq!(t.ripple_percent, 0.0);
        assert_eq!(t.filters.len(), 1);
        assert!(toml::from_str::<Tube>("kvp = 80\nanode = \"W\"\nfoo = 1").is_err());
        assert!(toml::from_str::<Tube>("kvp = 80\nanode = \"Cu\"").is_err());
        let t: Tube = toml::from_str("kvp = 80\nanode = \"W\"\nfilters = [\"Al:2.5\", \"Cu:0.1\"]").unwrap();
        assert_eq!(t.filters[1], Filter { material: "Cu".into(), thickness_mm: 0.1 });
        assert!(toml::from_str::<Tube>("kvp = 80\nanode = \"W\"\nfilters = [\"Al:-1\"]").is_err());
        assert!(toml::from_str::<Tube>("kvp = 80\nanode = \"W\"\nfilters = [{ material = \"Al\", thickness_mm = -1 }]").is_err());
    }

    #[test]
    fn ranges_are_checked() {
        assert!(Tube::new(80.0, Anode::W).validate().is_ok());
        assert!(matches!(Tube::new(14.0, Anode::W).validate(), Err(SpectrumError::KvpOutOfRange(_))));
        assert!(matches!(Tube::new(301.0, Anode::W).validate(), Err(SpectrumError::KvpOutOfRange(_))));
        assert!("w".parse::<Anode>().is_ok());
        assert!("Cu".parse::<Anode>().is_err());
    }
}
