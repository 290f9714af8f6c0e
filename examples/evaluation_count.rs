//! N evaluations of one loop at one rate (Tustin, computation delay 0.5 of
//! a period, zero-order hold), for instruction counts that do not depend
//! on the machine's load:
//! `valgrind --tool=callgrind target/release/examples/evaluation_count CASE RATE_HZ N`
//! (defaults `benches/cases/compare.toml`, the evaluation bench's loop
//! written as a case file; 1000 Hz; 20 evaluations).

use std::path::PathBuf;

use looprate::case::Case;
use looprate::explore::pick::prepare;
use looprate::model::discretize::Method;
use looprate::sampled::evaluate::Point;
use looprate::spec::HoldKind;

fn main() {
    if let Err(e) = run() {
        eprintln!("evaluation_count: {e}");
        std::process::exit(2);
    }
}

fn run() -> Result<(), String> {
    let mut args = std::env::args().skip(1);
    let path = PathBuf::from(args.next().unwrap_or_else(|| {
        concat!(env!("CARGO_MANIFEST_DIR"), "/benches/cases/compare.toml").into()
    }));
    let number = |what: &str, text: Option<String>, default: &str| -> Result<f64, String> {
        let text = text.unwrap_or_else(|| default.into());
        match text.parse::<f64>() {
            Ok(v) if v.is_finite() && v > 0.0 => Ok(v),
            _ => Err(format!(
                "{what}: expected a positive finite number, found `{text}`"
            )),
        }
    };
    let rate = number("RATE_HZ", args.next(), "1000")?;
    let n = number("N", args.next(), "20")? as usize;
    let text = std::fs::read_to_string(&path).map_err(|e| format!("{}: {e}", path.display()))?;
    let case = Case::parse(&text, &path).map_err(|e| e.to_string())?;
    let lp = prepare(&case).map_err(|e| e.to_string())?;
    let p = Point {
        rate_hz: rate,
        method: Some(Method::Tustin),
        delay: 0.5,
        hold: HoldKind::ZeroOrder,
    };
    for _ in 0..n {
        let e = lp.sampled(std::hint::black_box(&p));
        if std::hint::black_box(e).figures.is_none() {
            return Err(format!("{}: no figures at {rate} Hz", path.display()));
        }
    }
    Ok(())
}
