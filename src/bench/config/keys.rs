//! The command keys of `[instrument.commands]`, listed once: each key's name in the bench
//! file, the roles it serves, whether it carries a value and what it does. Parsing of the
//! commands table, the presets, the checks (which keys a role needs) and the bench's own
//! dispatch all read this table. Pure data.

use crate::measure::{LoadMode, Role};
use crate::protocol::Arity;

/// One command key of `[instrument.commands]`; the names are part of the bench file format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum CommandKey {
    LoadModeCc,
    LoadModeCv,
    LoadModeCr,
    LoadSetCurrent,
    LoadSetVoltage,
    LoadSetResistance,
    LoadInputOn,
    LoadInputOff,
    SourceSetVoltage,
    SourceOutputOn,
    SourceOutputOff,
    MeasureVoltage,
    MeasureCurrent,
    MeasureTemperature,
}

/// What the table says about one key.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct KeyInfo {
    pub key: CommandKey,
    /// The key's name in the bench file.
    pub name: &'static str,
    /// The roles whose instrument sends this command.
    pub roles: &'static [Role],
    /// Whether the command carries the setpoint (`{value}` placeholder).
    pub arity: Arity,
    /// What the command does, for people.
    pub does: &'static str,
}

const LOAD: &[Role] = &[Role::Load];
const SOURCE: &[Role] = &[Role::InputSource];
const VOLTMETERS: &[Role] = &[Role::OutputVoltmeter, Role::InputVoltmeter];
const AMMETERS: &[Role] = &[Role::OutputAmmeter, Role::InputAmmeter];
const THERMOMETER: &[Role] = &[Role::Thermometer];

const fn key(
    key: CommandKey,
    name: &'static str,
    roles: &'static [Role],
    arity: Arity,
    does: &'static str,
) -> KeyInfo {
    KeyInfo {
        key,
        name,
        roles,
        arity,
        does,
    }
}

/// Every command key, in the order the bench file documentation (and every message listing
/// them) uses.
pub const KEYS: [KeyInfo; 14] = {
    use Arity::{NoValue, OneValue};
    use CommandKey::*;
    [
        key(
            LoadModeCc,
            "load_mode_cc",
            LOAD,
            NoValue,
            "switch the load to constant current",
        ),
        key(
            LoadModeCv,
            "load_mode_cv",
            LOAD,
            NoValue,
            "switch the load to constant voltage",
        ),
        key(
            LoadModeCr,
            "load_mode_cr",
            LOAD,
            NoValue,
            "switch the load to constant resistance",
        ),
        key(
            LoadSetCurrent,
            "load_set_current",
            LOAD,
            OneValue,
            "set the load current (A)",
        ),
        key(
            LoadSetVoltage,
            "load_set_voltage",
            LOAD,
            OneValue,
            "set the load voltage (V)",
        ),
        key(
            LoadSetResistance,
            "load_set_resistance",
            LOAD,
            OneValue,
            "set the load resistance (ohm)",
        ),
        key(
            LoadInputOn,
            "load_input_on",
            LOAD,
            NoValue,
            "switch the load input on",
        ),
        key(
            LoadInputOff,
            "load_input_off",
            LOAD,
            NoValue,
            "switch the load input off",
        ),
        key(
            SourceSetVoltage,
            "source_set_voltage",
            SOURCE,
            OneValue,
            "set the input source voltage (V)",
        ),
        key(
            SourceOutputOn,
            "source_output_on",
            SOURCE,
            NoValue,
            "switch the input source output on",
        ),
        key(
            SourceOutputOff,
            "source_output_off",
            SOURCE,
            NoValue,
            "switch the input source output off",
        ),
        key(
            MeasureVoltage,
            "measure_voltage",
            VOLTMETERS,
            NoValue,
            "read a voltage (V)",
        ),
        key(
            MeasureCurrent,
            "measure_current",
            AMMETERS,
            NoValue,
            "read a current (A)",
        ),
        key(
            MeasureTemperature,
            "measure_temperature",
            THERMOMETER,
            NoValue,
            "read a temperature (degC)",
        ),
    ]
};

/// The key names, in table order (what an unknown key's message lists).
pub const KEY_NAMES: [&str; KEYS.len()] = {
    let mut names = [""; KEYS.len()];
    let mut i = 0;
    while i < KEYS.len() {
        names[i] = KEYS[i].name;
        i += 1;
    }
    names
};

/// The measuring keys: a measuring role is read with the one of these that serves it.
const MEASURING: [CommandKey; 3] = [
    CommandKey::MeasureVoltage,
    CommandKey::MeasureCurrent,
    CommandKey::MeasureTemperature,
];

impl CommandKey {
    /// Every key, in table order.
    pub fn all() -> impl Iterator<Item = CommandKey> {
        KEYS.iter().map(|k| k.key)
    }

    /// The table's row for this key.
    pub fn info(self) -> &'static KeyInfo {
        // The table lists the keys in declaration order.
        &KEYS[self as usize]
    }

    /// The key's name in the bench file.
    pub fn name(self) -> &'static str {
        self.info().name
    }

    pub fn arity(self) -> Arity {
        self.info().arity
    }

    /// The key with this name in the bench file.
    pub fn from_name(name: &str) -> Option<CommandKey> {
        KEYS.iter().find(|k| k.name == name).map(|k| k.key)
    }

    /// The measuring key that reads `role`, `None` for a role that takes no reading.
    pub fn measuring(role: Role) -> Option<CommandKey> {
        MEASURING
            .into_iter()
            .find(|k| k.info().roles.contains(&role))
    }

    /// The mode key and the setpoint key of a load mode.
    pub fn load_mode(mode: LoadMode) -> (CommandKey, CommandKey) {
        match mode {
            LoadMode::ConstantCurrent => (CommandKey::LoadModeCc, CommandKey::LoadSetCurrent),
            LoadMode::ConstantVoltage => (CommandKey::LoadModeCv, CommandKey::LoadSetVoltage),
            LoadMode::ConstantResistance => (CommandKey::LoadModeCr, CommandKey::LoadSetResistance),
        }
    }

    /// The key switching the load input (`Role::Load`) or the source output (any other role).
    pub fn switch(role: Role, on: bool) -> CommandKey {
        match (role, on) {
            (Role::Load, true) => CommandKey::LoadInputOn,
            (Role::Load, false) => CommandKey::LoadInputOff,
            (_, true) => CommandKey::SourceOutputOn,
            (_, false) => CommandKey::SourceOutputOff,
        }
    }
}

/// How a role's needed keys must be present.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Need {
    /// At least one of the keys.
    AnyOf(&'static [CommandKey]),
    /// Every one of the keys.
    AllOf(&'static [CommandKey]),
}

/// What an acting role needs from its instrument's commands, checked in this order, with the
/// preset that provides it.
pub const ROLE_NEEDS: [(Role, Need, Option<&str>); 3] = [
    (
        Role::Load,
        Need::AnyOf(&[
            CommandKey::LoadSetCurrent,
            CommandKey::LoadSetVoltage,
            CommandKey::LoadSetResistance,
        ]),
        Some("scpi_load"),
    ),
    (
        Role::Load,
        Need::AllOf(&[CommandKey::LoadInputOn, CommandKey::LoadInputOff]),
        None,
    ),
    (
        Role::InputSource,
        Need::AllOf(&[CommandKey::SourceSetVoltage]),
        Some("scpi_source"),
    ),
];

/// The default safe state: for each acting role held, its off command, in this order (load
/// input off first).
pub const SAFE_STATE_KEYS: [(Role, CommandKey); 2] = [
    (Role::Load, CommandKey::LoadInputOff),
    (Role::InputSource, CommandKey::SourceOutputOff),
];

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_table_follows_the_declaration_order() {
        for (i, k) in KEYS.iter().enumerate() {
            assert_eq!(k.key as usize, i, "{}", k.name);
            assert_eq!(CommandKey::from_name(k.name), Some(k.key));
        }
        assert_eq!(CommandKey::from_name("baud"), None);
    }

    #[test]
    fn every_measuring_role_has_a_measuring_key() {
        for role in Role::ALL {
            let k = CommandKey::measuring(role);
            assert_eq!(k.is_some(), role.quantity().is_some(), "{role}");
        }
        assert_eq!(
            CommandKey::measuring(Role::InputAmmeter),
            Some(CommandKey::MeasureCurrent)
        );
    }
}
