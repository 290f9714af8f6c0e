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

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let path = PathBuf::from(args.next().unwrap_or_else(|| {
        concat!(env!("CARGO_MANIFEST_DIR"), "/benches/cases/compare.toml").into()
    }));
    let rate: f64 = args.next().map_or(Ok(1000.0), |a| a.parse())?;
    let n: usize = args.next().map_or(Ok(20), |a| a.parse())?;
    let case = Case::parse(&std::fs::read_to_string(&path)?, &path)?;
    let lp = prepare(&case)?;
    let p = Point {
        rate_hz: rate,
        method: Some(Method::Tustin),
        delay: 0.5,
        hold: HoldKind::ZeroOrder,
    };
    for _ in 0..n {
        let e = lp.sampled(std::hint::black_box(&p));
        if std::hint::black_box(e).figures.is_none() {
            return Err(format!("no figures at {rate} Hz").into());
        }
    }
    Ok(())
}
