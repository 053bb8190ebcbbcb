//! The user-defined line protocol, as pure logic: command templates with typed, formatted
//! placeholders (`CURR {value:.4}`), reply parsing by a user pattern with named captures
//! (`value`, optional `unit` and `status`), number forms (plain, SCPI NR1/NR2/NR3 per
//! IEEE 488.2, engineering suffixes), unit scaling and overrange detection. Nothing here touches
//! a port, a file or a clock: values in, values out, so it can be tested and fuzzed directly.
//! The template syntax is documented in `template.rs`.

mod identity;
pub mod modbus;
mod number;
mod reply;
mod template;

pub use identity::{parse_identity, Identity};
pub use number::{parse_number, si_prefix, unit_prefix_multiplier, SCPI_OVERRANGE};
pub use reply::{
    ExpectedUnit, PatternError, ReplyError, ReplyParser, ReplySpec, BARE_NUMBER_PATTERN,
};
pub use template::{Arity, NumberStyle, Template, TemplateError, ValueFormat};
