//! Set-ups the cascade tests share (`tests/cascade.rs`,
//! `tests/cascade_holds.rs`).

use std::path::Path;

use looprate::case::Case;
use looprate::explore::cascade::prepare_cascade;
use looprate::sampled::cascade::evaluate::PreparedCascade;

/// An invented servo drive: winding 1/(0.0005 s + 0.5), current sensor
/// 1/(1e-5 s + 1), PI; mechanics 0.1/(1e-4 s + 1e-4), speed PI, swept over
/// `points` inner rates from 5 to 40 kHz. `outer_sensor` is the outer
/// sensor table, `extra` more tables.
pub fn drive(outer_sensor: &str, inner_delay: f64, points: usize, extra: &str) -> String {
    format!(
        r#"
[plant]
transfer = "1 / (0.0005*s + 0.5)"
[sensor]
transfer = "1 / (1e-5*s + 1)"
[controller]
pid = {{ kp = 3.1, ki = 3100 }}
[timing]
compute_delay = [{inner_delay}]
[rates]
min_hz = 5000
max_hz = 40000
points = {points}
[methods]
use = ["tustin"]
[outer.plant]
transfer = "0.1 / (1e-4*s + 1e-4)"
{outer_sensor}
[outer.controller]
pid = {{ kp = 0.25, ki = 12 }}
[outer.methods]
use = ["tustin"]
{extra}
"#
    )
}

/// The case read from `text` (errors name `file`) and its cascade.
pub fn prepared(text: &str, file: &str) -> (Case, PreparedCascade) {
    let c = Case::parse(text, Path::new(file)).unwrap();
    let pc = prepare_cascade(&c).unwrap().unwrap();
    (c, pc)
}
