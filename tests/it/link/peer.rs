//! A test-side SCPI peer for the link tests: remembers every setting it is sent (`CURR 0.25`,
//! `INP ON`) and answers its query (`CURR?`, `INP?`) with what it holds, `*OPC?` with `1`
//! (IEEE 488.2 section 10.19), `SYST:ERR?` with `+0,"No error"` (SCPI, from memory) and
//! `*IDN?` with the identity given. Other queries go to `more`.

use crate::support::link::{reply, tcp_responder, Act, Responder};
use std::collections::HashMap;

/// The peer on loopback TCP; `more` answers what the peer does not (return `None` to fall
/// back to the peer's own behaviour).
pub fn scpi_peer(
    idn: &'static str,
    mut more: impl FnMut(&str) -> Option<Act> + Send + 'static,
) -> Responder {
    let mut held: HashMap<String, String> = HashMap::new();
    tcp_responder(move |line| {
        if let Some(a) = more(line) {
            return a;
        }
        match line {
            "*IDN?" => return reply(idn),
            "*OPC?" => return reply("1"),
            "SYST:ERR?" => return reply("+0,\"No error\""),
            _ => {}
        }
        if let Some(q) = line.strip_suffix('?') {
            return match held.get(q) {
                Some(v) => reply(v),
                None => Act::Silent,
            };
        }
        if let Some((h, a)) = line.split_once(' ') {
            held.insert(h.to_string(), a.to_string());
        }
        Act::Silent
    })
}

/// The lines of `got` that are not queries (what was set, in order).
pub fn settings(got: &[String]) -> Vec<String> {
    got.iter().filter(|l| !l.ends_with('?')).cloned().collect()
}
