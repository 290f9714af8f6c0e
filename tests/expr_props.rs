//! Property tests: the expression parser and evaluator never panic, on
//! arbitrary text and on text built from the expression's own tokens (the
//! inputs most likely to reach deep parser states).

use looprate::case::expr::{Expr, MAX_DEGREE};
use proptest::prelude::*;

/// Parses and, when that succeeds, evaluates with every name bound to
/// `value`; the result must be a proper `Ok`/`Err`, never a panic, and
/// an error column must lie within the text (or one past its end).
fn exercise(text: &str, value: f64) {
    let len = text.chars().count();
    match Expr::parse(text) {
        Err(e) => assert!(e.column >= 1 && e.column <= len + 1, "{text:?}: {e}"),
        Ok(expr) => {
            assert_eq!(expr.source(), text);
            match expr.eval(&|_| Some(value)) {
                Err(e) => assert!(e.column >= 1 && e.column <= len + 1, "{text:?}: {e}"),
                Ok((num, den)) => {
                    assert!(!den.is_zero(), "{text:?}: zero denominator");
                    assert!(num.is_finite() && den.is_finite(), "{text:?}");
                    assert!(num.degree() <= MAX_DEGREE && den.degree() <= MAX_DEGREE);
                }
            }
        }
    }
}

fn token() -> impl Strategy<Value = &'static str> {
    prop::sample::select(vec![
        "s", "k", "tau", "_x1", "2", "0.5", "1e-3", ".5", "1e308", "9e9", "0", "64", "65", "+",
        "-", "*", "/", "^", "(", ")", " ", "(", ")", "^2", "^64", "-", "e", ".",
    ])
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(4000))]

    #[test]
    fn arbitrary_text_never_panics(text in ".{0,80}", value in any::<f64>()) {
        exercise(&text, value);
    }

    #[test]
    fn token_soup_never_panics(
        tokens in prop::collection::vec(token(), 0..60),
        value in prop::sample::select(vec![0.0, 1.0, -2.5, 1e300, f64::NAN, f64::INFINITY]),
    ) {
        exercise(&tokens.concat(), value);
    }

    #[test]
    fn deep_nesting_never_panics(depth in 0usize..2000, unary in any::<bool>()) {
        let text = if unary {
            format!("{}s", "-".repeat(depth))
        } else {
            format!("{}s{}", "(".repeat(depth), ")".repeat(depth))
        };
        let r = Expr::parse(&text);
        // The cap is part of the contract: up to 256 levels parse.
        prop_assert_eq!(r.is_ok(), depth <= looprate::case::expr::MAX_DEPTH);
        exercise(&text, 1.0);
    }
}

/// Well-formed sums of monomials evaluate to the coefficients written.
#[test]
fn polynomial_written_out_evaluates_exactly() {
    proptest!(|(coeffs in prop::collection::vec(-1000i32..1000, 1..8))| {
        let text = coeffs
            .iter()
            .enumerate()
            .map(|(i, c)| format!("({c})*s^{i}"))
            .collect::<Vec<_>>()
            .join(" + ");
        let (num, den) = Expr::parse(&text).unwrap().eval(&|_| None).unwrap();
        prop_assert_eq!(den.coeffs(), &[1.0][..]);
        for (i, &c) in coeffs.iter().enumerate() {
            prop_assert_eq!(num.coeff(i), f64::from(c));
        }
    });
}
