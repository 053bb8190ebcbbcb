//! Property tests: the reply parser, the number reader, the template parser and the bench
//! file checker never panic, whatever bytes they get; rendered numbers read back.

use proptest::prelude::*;
use regulus::bench::BenchConfig;
use regulus::protocol::{parse_number, Arity, ReplyParser, ReplySpec, Template};

fn parsers() -> &'static [ReplyParser] {
    static P: std::sync::OnceLock<Vec<ReplyParser>> = std::sync::OnceLock::new();
    P.get_or_init(build_parsers)
}

fn build_parsers() -> Vec<ReplyParser> {
    let tagged = ReplySpec {
        pattern: Some(regulus::bench::config::TAGGED_STREAM_PATTERN.to_string()),
        overrange_status: vec!["OL".into()],
        ok_status: vec!["OK".into()],
        ..ReplySpec::default()
    };
    let scaled = ReplySpec {
        scale: 1e-3,
        unit_prefixes: false,
        ..ReplySpec::default()
    };
    vec![
        ReplyParser::new(ReplySpec::default()).unwrap(),
        ReplyParser::new(tagged).unwrap(),
        ReplyParser::new(scaled).unwrap(),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(1000))]

    #[test]
    fn reply_parsing_never_panics_on_arbitrary_bytes(bytes in proptest::collection::vec(any::<u8>(), 0..200)) {
        let line = String::from_utf8_lossy(&bytes);
        for p in parsers() {
            // Any outcome is fine; a value must be a finite number.
            if let Ok(regulus::measure::Reading::Value(v)) = p.parse(&line) {
                prop_assert!(v.is_finite());
            }
        }
        let _ = parse_number(&line);
    }

    #[test]
    fn number_like_text_never_panics(s in "[-+]?[0-9]{0,20}\\.?[0-9]{0,20}([eE][-+]?[0-9]{0,4})?[GMkKmunp]?[A-Za-z]{0,4}") {
        for p in parsers() {
            let _ = p.parse(&s);
        }
        if let Some(v) = parse_number(&s) {
            prop_assert!(v.is_finite());
        }
    }

    #[test]
    fn templates_never_panic(s in "\\PC{0,40}", v in any::<f64>()) {
        if let Ok(t) = Template::parse_any(&s) {
            let _ = t.render(v);
        }
    }

    /// An NR3 number written by a template reads back within its rounding (6 decimals).
    #[test]
    fn exponent_form_reads_back(v in -1.0e30f64..1.0e30) {
        let t = Template::parse("{value:E6}", Arity::OneValue).unwrap();
        let text = t.render(v).unwrap();
        let back = parse_number(&text).unwrap();
        prop_assert!((back - v).abs() <= v.abs() * 1e-6 + 1e-300, "{} -> {} -> {}", v, text, back);
    }

    #[test]
    fn bench_file_checking_never_panics(s in "\\PC{0,300}") {
        let _ = BenchConfig::parse(&s, "fuzz.toml");
    }

    /// A valid bench file with random text spliced in: an error (with a position inside the
    /// text) or a valid configuration, never a panic.
    #[test]
    fn spliced_bench_files_never_panic(at in 0usize..400, junk in "\\PC{0,12}") {
        let base = include_str!("../../../config/bench-stream-meter.toml");
        let mut cut = at.min(base.len());
        while !base.is_char_boundary(cut) {
            cut -= 1;
        }
        let text = format!("{}{}{}", &base[..cut], junk, &base[cut..]);
        if let Err(regulus::bench::BenchError::Config(regulus::config::Located { line: Some(line), .. })) = BenchConfig::parse(&text, "x.toml") {
            prop_assert!(line >= 1 && line <= text.lines().count().max(1) + 1);
        }
    }
}
