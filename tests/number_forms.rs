//! Numbers in CSV and JSON are plain SI values, each in the shortest
//! decimal form that reads back to the same double (`0.051`, never
//! `0.051000000000000004` for the double nearest 0.051).
//!
//! The check is made on the definition, not on the formatter that wrote
//! the files: a cell with `k` significant digits must read back to its
//! double, and no form with `k - 1` significant digits may (the double is
//! the one IEEE 754 rounding gives, so "reads back to the same double" is
//! Rust's correctly rounded `str::parse::<f64>`). Any decimal that reads
//! back to the double with fewer digits would be a shorter form.

use std::path::{Path, PathBuf};
use std::process::Command;

/// The significant digits of a decimal number's text (`-1.2300e-5` -> 5
/// counting the written trailing zeros after a point, which a shortest
/// form never has; `900` -> 1).
fn significant_digits(text: &str) -> usize {
    let mantissa = text
        .trim_start_matches('-')
        .split(['e', 'E'])
        .next()
        .unwrap_or("");
    let digits: String = mantissa.chars().filter(|c| c.is_ascii_digit()).collect();
    let trimmed = digits.trim_start_matches('0');
    // A whole number's trailing zeros only place its digits (`900`).
    let trimmed = if mantissa.contains('.') {
        trimmed
    } else {
        trimmed.trim_end_matches('0')
    };
    if trimmed.is_empty() { 1 } else { trimmed.len() }
}

/// `Ok` when `text` is a shortest round-trip form of its double.
fn shortest(text: &str) -> Result<(), String> {
    let v: f64 = text
        .parse()
        .map_err(|e| format!("`{text}` is not a number: {e}"))?;
    if !v.is_finite() || v == 0.0 {
        return Ok(());
    }
    // A whole number keeps one `.0` to say it is a real number (as JSON
    // writers mark floats); that digit is not counted.
    let text = match text.strip_suffix(".0") {
        Some(whole) if !whole.contains(['.', 'e', 'E']) => whole,
        _ => text,
    };
    let k = significant_digits(text);
    if k > 17 {
        return Err(format!(
            "`{text}` has {k} significant digits (17 always suffice)"
        ));
    }
    if k >= 2 {
        // The nearest decimals with k - 1 significant digits: round to
        // nearest, and one unit of the last digit either side (a shorter
        // form reading back to v must be one of these three).
        let base = format!("{:.*e}", k - 2, v);
        let (mant, exp) = base.split_once('e').unwrap();
        let m: f64 = mant.parse().unwrap();
        let step = 10f64.powi(-(k as i32 - 2));
        for cand in [m - step, m, m + step] {
            let form = format!("{:.*}e{exp}", k - 2, cand);
            if form.parse::<f64>() == Ok(v) {
                return Err(format!(
                    "`{text}` reads back the same as the shorter `{form}`"
                ));
            }
        }
    }
    Ok(())
}

#[test]
fn the_check_itself_tells_shortest_from_long_forms() {
    // 0.051 and 0.051000000000000004 are two different doubles
    // (0.051000000000000004 is the shortest text of the double above
    // 0.051); 0.0510 is 0.051 written with a needless digit.
    assert!(shortest("0.051").is_ok());
    assert!(shortest("0.051000000000000004").is_ok());
    assert!(shortest("0.05100000000000000").is_err());
    assert!(shortest("1396.0000000000002").is_ok());
    assert!(shortest("1396.00000000000000").is_err());
    assert!(shortest("0.10000000000000000555").is_err());
    assert!(shortest("1e-5").is_ok());
    assert!(shortest("25.0").is_ok());
    assert!(shortest("25.00").is_err());
    assert!(shortest("1.00e-5").is_err());
}

/// Every number token of a JSON text (outside strings).
fn json_numbers(text: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut in_string = false;
    let mut escaped = false;
    let mut current = String::new();
    for c in text.chars() {
        if in_string {
            if escaped {
                escaped = false;
            } else if c == '\\' {
                escaped = true;
            } else if c == '"' {
                in_string = false;
            }
            continue;
        }
        if c == '"' {
            in_string = true;
        } else if c.is_ascii_digit()
            || (current.is_empty() && c == '-')
            || (!current.is_empty() && matches!(c, '.' | 'e' | 'E' | '+' | '-'))
        {
            current.push(c);
            continue;
        }
        if !current.is_empty() {
            out.push(std::mem::take(&mut current));
        }
    }
    out
}

fn looprate(args: &[&str]) -> String {
    let out = Command::new(env!("CARGO_BIN_EXE_looprate"))
        .args(args)
        .output()
        .expect("looprate runs");
    assert!(
        out.status.success(),
        "looprate {args:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stdout).into_owned()
}

fn demo(name: &str) -> String {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("demo-cases")
        .join(name)
        .display()
        .to_string()
}

fn check_csv(path: &Path) -> usize {
    let mut reader = csv::Reader::from_path(path).unwrap();
    let mut n = 0;
    for record in reader.records() {
        for cell in record.unwrap().iter() {
            if cell.parse::<f64>().is_ok_and(f64::is_finite) {
                if let Err(e) = shortest(cell) {
                    panic!("{}: {e}", path.display());
                }
                n += 1;
            }
        }
    }
    n
}

#[test]
fn csv_and_json_numbers_of_a_pick_are_in_shortest_form() {
    let dir = std::env::temp_dir().join(format!("looprate-number-forms-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    let out = dir.display().to_string();
    // The belt conveyor: plant variants and coefficient formats, so the
    // variant and precision columns are written too.
    looprate(&["pick", &demo("belt-conveyor.toml"), "--out", &out]);
    let mut checked = 0;
    for entry in std::fs::read_dir(&dir).unwrap() {
        let path = entry.unwrap().path();
        match path.extension().and_then(|e| e.to_str()) {
            Some("csv") => checked += check_csv(&path),
            Some("json") => {
                let text = std::fs::read_to_string(&path).unwrap();
                for n in json_numbers(&text) {
                    if let Err(e) = shortest(&n) {
                        panic!("{}: {e}", path.display());
                    }
                    checked += 1;
                }
            }
            _ => {}
        }
    }
    assert!(checked > 1000, "only {checked} numbers were found to check");
    let eval = looprate(&[
        "eval",
        &demo("belt-conveyor.toml"),
        "--rate",
        "1396",
        "--json",
    ]);
    let numbers = json_numbers(&eval);
    assert!(numbers.len() > 10, "eval --json printed {eval}");
    for n in numbers {
        shortest(&n).unwrap_or_else(|e| panic!("eval --json: {e}"));
    }
    let _ = std::fs::remove_dir_all(&dir);
}
