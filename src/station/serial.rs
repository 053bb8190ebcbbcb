//! Checking a scanned unit serial before a batch tests it: not empty, safe as a folder name,
//! matching the station's pattern, and, when this batch already tested it, held for a
//! confirmation. Pure.

use super::Station;
use std::collections::HashMap;

/// What the batch should do with a scanned serial.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum SerialCheck {
    /// Test it.
    Accept,
    /// Already tested `times` times in this batch: ask before testing it again.
    Repeat { times: usize },
    /// Refuse it, saying why.
    Refuse(String),
}

/// The serials a batch has tested so far, and the station's rules for a serial.
#[derive(Debug, Default)]
pub struct SerialGate {
    tested: HashMap<String, usize>,
}

impl SerialGate {
    pub fn new() -> SerialGate {
        SerialGate::default()
    }

    /// Check a serial as typed (surrounding blanks, as a scanner may send, are trimmed by the
    /// caller).
    pub fn check(&self, station: &Station, serial: &str) -> SerialCheck {
        if serial.is_empty() {
            return SerialCheck::Refuse("empty serial: scan or type the unit's serial".into());
        }
        if let Err(m) = crate::record::check_component("unit serial", serial) {
            return SerialCheck::Refuse(m);
        }
        if !station.serial_matches(serial) {
            return SerialCheck::Refuse(format!(
                "'{serial}' does not match this station's unit pattern {} (station file {}): check the label or the scanner",
                station.unit_pattern.as_deref().unwrap_or(""),
                station.path.display()
            ));
        }
        match self.tested.get(serial) {
            Some(&times) => SerialCheck::Repeat { times },
            None => SerialCheck::Accept,
        }
    }

    /// Note that a serial was tested.
    pub fn tested(&mut self, serial: &str) {
        *self.tested.entry(serial.to_string()).or_default() += 1;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::path::Path;

    #[test]
    fn pattern_safety_and_repeats() {
        let st = Station::parse(
            "id = \"S\"\nbench = \"b\"\ndesign = \"d\"\nplan = \"p\"\nunit_pattern = \"U-[0-9]{3}\"\n",
            Path::new("s.toml"),
        )
        .unwrap();
        let mut g = SerialGate::new();
        assert_eq!(g.check(&st, "U-001"), SerialCheck::Accept);
        assert!(matches!(g.check(&st, "U-01"), SerialCheck::Refuse(m) if m.contains("pattern")));
        assert!(matches!(g.check(&st, ""), SerialCheck::Refuse(_)));
        assert!(matches!(g.check(&st, "../x"), SerialCheck::Refuse(_)));
        g.tested("U-001");
        assert_eq!(g.check(&st, "U-001"), SerialCheck::Repeat { times: 1 });
        g.tested("U-001");
        assert_eq!(g.check(&st, "U-001"), SerialCheck::Repeat { times: 2 });
    }
}
