//! Reply parsing, number reading and template parsing must never panic on any input.
#![no_main]

use libfuzzer_sys::fuzz_target;
use regulus::protocol::{parse_identity, parse_number, ReplyParser, ReplySpec, Template};
use std::sync::OnceLock;

fn parsers() -> &'static [ReplyParser] {
    static P: OnceLock<Vec<ReplyParser>> = OnceLock::new();
    P.get_or_init(|| {
        let tagged = ReplySpec {
            pattern: Some(regulus::bench::config::TAGGED_STREAM_PATTERN.to_string()),
            overrange_status: vec!["OL".into()],
            ok_status: vec!["OK".into()],
            ..ReplySpec::default()
        };
        vec![
            ReplyParser::new(ReplySpec::default()).expect("built-in spec"),
            ReplyParser::new(tagged).expect("built-in pattern"),
        ]
    })
}

fuzz_target!(|data: &[u8]| {
    let line = String::from_utf8_lossy(data);
    for p in parsers() {
        if let Ok(regulus::measure::Reading::Value(v)) = p.parse(&line) {
            assert!(v.is_finite());
        }
    }
    let _ = parse_number(&line);
    let _ = parse_identity(&line);
    if let Ok(t) = Template::parse_any(&line) {
        let _ = t.render(1.25);
    }
});
