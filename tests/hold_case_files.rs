//! Case files with hold kinds and transport delays: what loads, and every
//! bad input naming the file and the field (the unknown kind's error lists
//! the kinds).

use looprate::case::{Case, CaseError};
use looprate::spec::HoldKind;
use std::path::Path;

const FILE: &str = "cases/holds.toml";

fn case(plant: &str, sensor: &str, controller: &str, timing: &str) -> String {
    format!(
        "[plant]\ntransfer = \"20 / ((s + 2) * (s + 5))\"\n{plant}\
         [sensor]\ntransfer = \"1 / (0.01*s + 1)\"\n{sensor}\
         [controller]\n{controller}\n\
         [timing]\n{timing}\n\
         [rates]\nmin_hz = 10\nmax_hz = 1000\npoints = 20\n\
         [spec]\nmax_overshoot_pct = 20\n{}",
        if controller.contains("rate_hz") {
            ""
        } else {
            "[methods]\nuse = [\"tustin\"]\n"
        }
    )
}

const PI: &str = "transfer = \"0.4 * (s + 5) / s\"";
const PI_Z: &str = "numerator_z = [0.41, -0.39]\ndenominator_z = [1, -1]\nrate_hz = 100";

fn parse(text: &str) -> Result<Case, CaseError> {
    Case::parse(text, Path::new(FILE))
}

#[test]
fn holds_and_transport_delays_load() {
    let c = parse(&case("", "", PI, "compute_delay = 1.5")).unwrap();
    assert_eq!(c.holds, vec![HoldKind::ZeroOrder]);
    assert_eq!((c.plant_delay_s, c.sensor_delay_s), (0.0, 0.0));
    let c = parse(&case(
        "delay_s = 0.35\n",
        "delay_s = 0.02\n",
        PI,
        "hold = [\"interpolating\", \"zero-order\", \"first-order\"]",
    ))
    .unwrap();
    assert_eq!(
        c.holds,
        vec![
            HoldKind::Interpolating,
            HoldKind::ZeroOrder,
            HoldKind::FirstOrder
        ]
    );
    assert_eq!((c.plant_delay_s, c.sensor_delay_s), (0.35, 0.02));
    let c = parse(&case("", "", PI, "hold = \"first-order\"")).unwrap();
    assert_eq!(c.holds, vec![HoldKind::FirstOrder]);
    // A controller in z that says which hold it was designed for.
    let z = format!("{PI_Z}\nhold = \"first-order\"");
    let c = parse(&case("", "", &z, "")).unwrap();
    assert_eq!(c.holds, vec![HoldKind::FirstOrder]);
}

#[test]
fn bad_holds_and_delays_name_file_and_field() {
    let z_ramp = case("", "", PI_Z, "hold = [\"zero-order\", \"interpolating\"]");
    let z_declared = format!("{PI_Z}\nhold = \"first-order\"");
    let z_declared = case("", "", &z_declared, "hold = \"zero-order\"");
    let cont_declared = format!("{PI}\nhold = \"first-order\"");
    let bad: Vec<(&str, String, &str, &[&str])> = vec![
        (
            "unknown hold",
            case("", "", PI, "hold = \"triangle\""),
            "timing.hold",
            &[
                "unknown hold kind `triangle`",
                "zero-order, first-order, interpolating",
            ],
        ),
        (
            "unknown hold in a list",
            case("", "", PI, "hold = [\"zero-order\", \"ramp-invariant\"]"),
            "timing.hold[1]",
            &["unknown hold kind `ramp-invariant`", "interpolating"],
        ),
        (
            "hold twice",
            case("", "", PI, "hold = [\"zero-order\", \"zero-order\"]"),
            "timing.hold[1]",
            &["listed twice"],
        ),
        (
            "empty hold list",
            case("", "", PI, "hold = []"),
            "timing.hold",
            &["empty list", "zero-order"],
        ),
        (
            "hold not a name",
            case("", "", PI, "hold = 1"),
            "timing.hold",
            &["expected a hold kind name"],
        ),
        (
            "negative plant delay",
            case("delay_s = -0.1\n", "", PI, ""),
            "plant.delay_s",
            &[">= 0 and at most 1e9", "-0.1"],
        ),
        (
            "infinite sensor delay",
            case("", "delay_s = inf\n", PI, ""),
            "sensor.delay_s",
            &["finite number"],
        ),
        (
            "nan plant delay",
            case("delay_s = nan\n", "", PI, ""),
            "plant.delay_s",
            &["finite number"],
        ),
        (
            "delay as text",
            case("delay_s = \"0.3\"\n", "", PI, ""),
            "plant.delay_s",
            &["expected a number of seconds"],
        ),
        (
            "negative computation delay",
            case("", "", PI, "compute_delay = -0.5"),
            "timing.compute_delay",
            &[">= 0"],
        ),
        (
            "delay on the controller",
            case("", "", &format!("{PI}\ndelay_s = 0.1"), ""),
            "controller.delay_s",
            &["[plant]", "[sensor]", "compute_delay"],
        ),
        (
            "ramp hold with a controller in z",
            z_ramp,
            "timing.hold[1]",
            &["given in z", "assumes a zero-order hold", "`interpolating`"],
        ),
        (
            "another hold than the z controller declares",
            z_declared,
            "timing.hold",
            &["assumes a first-order hold", "[controller] hold"],
        ),
        (
            "hold on a continuous controller",
            case("", "", &cont_declared, ""),
            "controller.hold",
            &["only a controller given in z"],
        ),
        (
            "unknown hold on a z controller",
            case("", "", &format!("{PI_Z}\nhold = \"ramp\""), ""),
            "controller.hold",
            &["unknown hold kind `ramp`", "first-order"],
        ),
        (
            "exp in an expression",
            "[plant]\ntransfer = \"exp(-0.3*s) / (s + 1)\"\n[controller]\ntransfer = \"1\"\n[rates]\nmin_hz = 1\nmax_hz = 10\n[spec]\nmax_overshoot_pct = 20\n".to_string(),
            "plant.transfer",
            &["column 1", "`exp(...)`", "delay_s"],
        ),
    ];
    for (what, text, field, fragments) in bad {
        let e = match parse(&text) {
            Ok(_) => panic!("{what}: accepted\n{text}"),
            Err(e) => e,
        };
        let msg = e.to_string();
        assert!(msg.starts_with(FILE), "{what}: {msg}");
        assert_eq!(e.field(), Some(field), "{what}: {msg}");
        for f in fragments {
            assert!(msg.contains(f), "{what}: `{f}` not in: {msg}");
        }
    }
}
