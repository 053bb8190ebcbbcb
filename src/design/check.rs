//! Reading a design: deserialise the file ([`file::deserialize`]), then run its rules in a
//! fixed order, the file's own rules ([`rules`]) and the one rule that needs the model (the
//! output range the divider gives), so the first problem found is reported with its file,
//! line and column. Only [`Design::load`] reads a file.

use super::file::{self, Design, DesignError};
use super::rules::{self, err, Checked, Problem};
use crate::config;
use std::path::Path;

/// A named rule over a whole design.
type Rule = fn(&Design) -> Checked;

/// Every rule, in the order they are reported.
const RULES: [(&str, Rule); 11] = [
    ("input", rules::input),
    ("reference", rules::reference),
    ("feedback", rules::feedback),
    ("pass", rules::pass),
    ("limit", rules::limit),
    ("load", rules::load),
    ("output_range", output_range),
    ("aux", rules::aux),
    ("amplifier", rules::amplifier),
    ("environment", rules::environment),
    ("rules", rules::rules),
];

/// The output range the divider gives, and the output setting within it.
fn output_range(d: &Design) -> Checked {
    let (lo, hi) = super::model::nominal_output_range(d);
    if !lo.is_finite() || !hi.is_finite() || hi <= 0.0 {
        return err(
            &["feedback"],
            "the feedback divider gives no usable output voltage",
        );
    }
    if let Some(s) = d.load.output_setting_v {
        if !s.is_finite() || s < lo - 1e-9 || s > hi + 1e-9 {
            return err(
                &["load", "output_setting_v"],
                format!(
                    "the feedback divider cannot reach {s} V from the {} V reference: this design's output range is {lo:.3} V to {hi:.3} V",
                    d.reference.volts
                ),
            );
        }
    }
    Ok(())
}

impl Design {
    /// Read and validate a design file.
    pub fn load(path: &Path) -> Result<Design, DesignError> {
        let text = std::fs::read_to_string(path).map_err(|source| DesignError::Read {
            path: path.display().to_string(),
            source,
        })?;
        Design::parse(&text, &path.display().to_string())
    }

    /// Parse and validate design text; `label` names the file in messages.
    pub fn parse(text: &str, label: &str) -> Result<Design, DesignError> {
        let design = file::deserialize(text, label)?;
        design.validate().map_err(|(path, msg)| {
            DesignError::Invalid(config::at_path(label, text, &path, msg))
        })?;
        Ok(design)
    }

    /// Check values that the file format cannot: returns the key path at fault and a message.
    pub fn validate(&self) -> Result<(), Problem> {
        RULES.iter().try_for_each(|(_, rule)| rule(self))
    }
}
