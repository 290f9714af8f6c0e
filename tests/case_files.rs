//! Case-file loading: valid files give the hand-computed models, and
//! every kind of bad input gives an error that names the file and the
//! dotted field (and the column, for expressions).

use looprate::case::{Case, CaseError, Controller};
use looprate::model::discretize::Method;
use looprate::spec::{Cycles, Rates, Spacing, UncertaintyMode};
use std::path::Path;

const FILE: &str = "cases/belt.toml";

/// The base case, one section per entry, so a test can replace or drop a
/// section by name.
const BASE: &[(&str, &str)] = &[
    ("top", "title = \"Belt conveyor speed loop\"\n"),
    ("params", ""),
    (
        "plant",
        "[plant]\ntransfer = \"38 / ((0.42*s + 1) * (0.004*s + 1))\"\n",
    ),
    ("sensor", "[sensor]\ntransfer = \"1 / (0.0008*s + 1)\"\n"),
    (
        "controller",
        "[controller]\ntransfer = \"0.05 * (s + 12) / s\"\n",
    ),
    ("timing", "[timing]\ncompute_delay = 0.5\n"),
    (
        "rates",
        "[rates]\nmin_hz = 20\nmax_hz = 5000\npoints = 200\n",
    ),
    (
        "methods",
        "[methods]\nuse = [\"tustin\", \"pole-zero-match\", \"step-invariant\"]\n",
    ),
    ("spec", "[spec]\nmax_overshoot_pct = 20\n"),
    ("budget", ""),
    ("uncertainty", ""),
];

/// The base case with some sections replaced (an empty body drops one).
fn text_with(overrides: &[(&str, &str)]) -> String {
    for (name, _) in overrides {
        assert!(
            BASE.iter().any(|(n, _)| n == name),
            "unknown section {name}"
        );
    }
    BASE.iter()
        .map(|(name, body)| {
            overrides
                .iter()
                .find(|(n, _)| n == name)
                .map_or(*body, |(_, b)| *b)
        })
        .collect::<Vec<_>>()
        .join("")
}

fn parse(text: &str) -> Result<Case, CaseError> {
    Case::parse(text, Path::new(FILE))
}

fn ok(overrides: &[(&str, &str)]) -> Case {
    let text = text_with(overrides);
    parse(&text).unwrap_or_else(|e| panic!("{e}\n--- in ---\n{text}"))
}

fn close(got: &[f64], want: &[f64]) {
    assert_eq!(got.len(), want.len(), "{got:?} vs {want:?}");
    for (g, w) in got.iter().zip(want) {
        assert!(
            (g - w).abs() <= 1e-12 * w.abs().max(1.0),
            "{got:?} vs {want:?}"
        );
    }
}

// ------------------------------------------------------------ bad input

/// (what, overrides, field, fragments the message must contain).
type Bad = (
    &'static str,
    &'static [(&'static str, &'static str)],
    &'static str,
    &'static [&'static str],
);

const BAD: &[Bad] = &[
    // Names an earlier version used: refused, naming the new one (no alias).
    (
        "old key tf",
        &[("plant", "[plant]\ntf = \"1 / (s + 1)\"\n")], // keep-name
        "plant.tf",                                      // keep-name
        &["now called `transfer`"],
    ),
    (
        "old key numerator_z",
        &[(
            "controller",
            "[controller]\nnum_z = [1.0]\nden_z = [1.0, -0.5]\nrate_hz = 100\n",
        )], // keep-name
        "controller.num_z", // keep-name
        &["now called `numerator_z`"],
    ),
    (
        "old method name zoh",
        &[("methods", "[methods]\nuse = [\"tustin\", \"zoh\"]\n")], // keep-name
        "methods.use[1]",
        &["now called `step-invariant`"],
    ),
    (
        "old method name matched",
        &[("methods", "[methods]\nuse = [\"matched\"]\n")], // keep-name
        "methods.use[0]",
        &["now called `pole-zero-match`"],
    ),
    // Models.
    (
        "improper plant",
        &[("plant", "[plant]\ntransfer = \"s^2 / (s + 1)\"\n")],
        "plant.transfer",
        &["improper plant", "degree 2", "degree 1"],
    ),
    (
        "improper sensor",
        &[("sensor", "[sensor]\ntransfer = \"s + 1\"\n")],
        "sensor.transfer",
        &["improper sensor"],
    ),
    (
        "improper controller",
        &[("controller", "[controller]\ntransfer = \"s\"\n")],
        "controller.transfer",
        &["improper controller"],
    ),
    (
        "zero denominator",
        &[("plant", "[plant]\ntransfer = \"1 / (s - s)\"\n")],
        "plant.transfer",
        &["column 3", "division by zero"],
    ),
    (
        "zero plant",
        &[("plant", "[plant]\ntransfer = \"0 / (s + 1)\"\n")],
        "plant.transfer",
        &["identically zero"],
    ),
    (
        "zero controller",
        &[("controller", "[controller]\ntransfer = \"0*s/(s+1)\"\n")],
        "controller.transfer",
        &["identically zero"],
    ),
    (
        "zero sensor",
        &[("sensor", "[sensor]\ntransfer = \"0\"\n")],
        "sensor.transfer",
        &["identically zero"],
    ),
    (
        "zero gain in zeros/poles form",
        &[("plant", "[plant]\npoles = [-1]\ngain = 0\n")],
        "plant.gain",
        &["non-zero"],
    ),
    (
        "number overflowing to infinity",
        &[("plant", "[plant]\ntransfer = \"1e999 / (s + 1)\"\n")],
        "plant.transfer",
        &["column 1", "overflows"],
    ),
    (
        "coefficient overflowing in arithmetic",
        &[("plant", "[plant]\ntransfer = \"1e300 * 1e300 / (s + 1)\"\n")],
        "plant.transfer",
        &["column 7", "not a finite number"],
    ),
    (
        "non-finite gain",
        &[("plant", "[plant]\npoles = [-1]\ngain = nan\n")],
        "plant.gain",
        &["finite"],
    ),
    (
        "non-finite pole",
        &[("plant", "[plant]\npoles = [-1, inf]\n")],
        "plant.poles[1]",
        &["finite"],
    ),
    (
        "non-finite complex string",
        &[("plant", "[plant]\npoles = [\"inf+2j\", \"inf-2j\"]\n")],
        "plant.poles[0]",
        &["inf+2j"],
    ),
    (
        "empty expression",
        &[("plant", "[plant]\ntransfer = \"   \"\n")],
        "plant.transfer",
        &["column 1", "empty expression"],
    ),
    (
        "unbalanced parentheses",
        &[("plant", "[plant]\ntransfer = \"38 / ((0.42*s + 1)\"\n")],
        "plant.transfer",
        &["column 6", "never closed"],
    ),
    (
        "bad exponent",
        &[("plant", "[plant]\ntransfer = \"1 / (s + 1)^-2\"\n")],
        "plant.transfer",
        &["column 13", "negative"],
    ),
    (
        "plant given two ways",
        &[("plant", "[plant]\ntransfer = \"1/(s+1)\"\npoles = [-1]\n")],
        "plant",
        &["two ways"],
    ),
    ("no plant", &[("plant", "")], "plant", &["missing"]),
    (
        "empty plant table",
        &[("plant", "[plant]\n")],
        "plant",
        &["missing"],
    ),
    // Conjugates.
    (
        "missing conjugate pole",
        &[("plant", "[plant]\npoles = [-1, \"-3+4j\"]\n")],
        "plant.poles[1]",
        &["`-3+4j`", "`-3-4j`"],
    ),
    (
        "missing conjugate zero (multiplicity)",
        &[(
            "plant",
            "[plant]\nzeros = [\"2j\", \"2j\", \"-2j\"]\npoles = [-1, -2, -3]\n",
        )],
        "plant.zeros[0]",
        &["`2j`", "`-2j`"],
    ),
    (
        "malformed complex",
        &[("plant", "[plant]\npoles = [\"-3+4k\"]\n")],
        "plant.poles[0]",
        &["-3+4k"],
    ),
    (
        "more zeros than poles",
        &[("plant", "[plant]\nzeros = [-1, -2]\npoles = [-3]\n")],
        "plant.zeros",
        &["improper plant", "more zeros (2) than poles (1)"],
    ),
    // Controller forms.
    (
        "controller given two ways",
        &[(
            "controller",
            "[controller]\ntransfer = \"1\"\npid = { kp = 1 }\n",
        )],
        "controller",
        &["`transfer`", "`pid`", "2 ways"],
    ),
    (
        "controller given three ways",
        &[(
            "controller",
            "[controller]\ngain = 2\npid = { kp = 1 }\nnumerator_z = [1]\ndenominator_z = [1]\nrate_hz = 100\n",
        )],
        "controller",
        &[
            "`zeros`/`poles`/`gain`",
            "`pid`",
            "`numerator_z`/`denominator_z`/`rate_hz`",
        ],
    ),
    (
        "no controller form",
        &[("controller", "[controller]\n")],
        "controller",
        &["no controller given"],
    ),
    (
        "no controller table",
        &[("controller", "")],
        "controller",
        &["missing"],
    ),
    (
        "pid derivative without filter",
        &[("controller", "[controller]\npid = { kp = 1, kd = 0.1 }\n")],
        "controller.pid.kd",
        &["improper", "derivative_filter_hz"],
    ),
    (
        "pid all zero",
        &[("controller", "[controller]\npid = { ki = 0 }\n")],
        "controller.pid",
        &["all zero"],
    ),
    (
        "pid filter not positive",
        &[(
            "controller",
            "[controller]\npid = { kp = 1, kd = 0.1, derivative_filter_hz = 0 }\n",
        )],
        "controller.pid.derivative_filter_hz",
        &["greater than zero"],
    ),
    (
        "pid unknown key",
        &[("controller", "[controller]\npid = { kp = 1, kf = 2 }\n")],
        "controller.pid.kf",
        &["unknown field `kf`"],
    ),
    (
        "discrete rate zero",
        &[
            (
                "controller",
                "[controller]\nnumerator_z = [1, -0.5]\ndenominator_z = [1, -1]\nrate_hz = 0\n",
            ),
            ("methods", ""),
        ],
        "controller.rate_hz",
        &["greater than zero"],
    ),
    (
        "discrete leading denominator zero",
        &[
            (
                "controller",
                "[controller]\nnumerator_z = [1, -0.5]\ndenominator_z = [0, 1, -1]\nrate_hz = 100\n",
            ),
            ("methods", ""),
        ],
        "controller.denominator_z",
        &["leading"],
    ),
    (
        "discrete non-causal",
        &[
            (
                "controller",
                "[controller]\nnumerator_z = [1, 0, -0.5]\ndenominator_z = [1, -1]\nrate_hz = 100\n",
            ),
            ("methods", ""),
        ],
        "controller.numerator_z",
        &["non-causal"],
    ),
    (
        "discrete non-finite coefficient",
        &[
            (
                "controller",
                "[controller]\nnumerator_z = [1, nan]\ndenominator_z = [1, -1]\nrate_hz = 100\n",
            ),
            ("methods", ""),
        ],
        "controller.numerator_z[1]",
        &["finite"],
    ),
    (
        "discrete without rate",
        &[
            (
                "controller",
                "[controller]\nnumerator_z = [1]\ndenominator_z = [1, -1]\n",
            ),
            ("methods", ""),
        ],
        "controller.rate_hz",
        &["missing"],
    ),
    (
        "methods with a discrete controller",
        &[(
            "controller",
            "[controller]\nnumerator_z = [1]\ndenominator_z = [1, -1]\nrate_hz = 100\n",
        )],
        "methods",
        &["does not apply"],
    ),
    // Parameters.
    (
        "unbound identifier",
        &[("plant", "[plant]\ntransfer = \"k / (tau*s + 1)\"\n")],
        "plant.transfer",
        &["column 1", "unbound identifier `k`"],
    ),
    (
        "unbound identifier, later column",
        &[
            ("params", "[params]\nk = 38\n"),
            ("plant", "[plant]\ntransfer = \"k / (tau*s + 1)\"\n"),
        ],
        "plant.transfer",
        &["column 6", "unbound identifier `tau`"],
    ),
    (
        "declared but unused parameter",
        &[("params", "[params]\nk = 38\n")],
        "params.k",
        &["`k`", "not used"],
    ),
    (
        "parameter min above nominal",
        &[
            (
                "params",
                "[params]\nk = { nominal = 38, min = 40, max = 46 }\n",
            ),
            ("plant", "[plant]\ntransfer = \"k / (s + 1)\"\n"),
        ],
        "params.k",
        &["min <= nominal <= max"],
    ),
    (
        "parameter nominal above max",
        &[
            (
                "params",
                "[params]\nk = { nominal = 50, min = 30, max = 46 }\n",
            ),
            ("plant", "[plant]\ntransfer = \"k / (s + 1)\"\n"),
        ],
        "params.k",
        &["min <= nominal <= max"],
    ),
    (
        "parameter not finite",
        &[
            ("params", "[params]\nk = nan\n"),
            ("plant", "[plant]\ntransfer = \"k / (s + 1)\"\n"),
        ],
        "params.k.nominal",
        &["finite"],
    ),
    (
        "parameter range not finite",
        &[
            ("params", "[params]\nk = { nominal = 1, max = inf }\n"),
            ("plant", "[plant]\ntransfer = \"k / (s + 1)\"\n"),
        ],
        "params.k.max",
        &["finite"],
    ),
    (
        "parameter without nominal",
        &[
            ("params", "[params]\nk = { min = 1, max = 2 }\n"),
            ("plant", "[plant]\ntransfer = \"k / (s + 1)\"\n"),
        ],
        "params.k.nominal",
        &["missing"],
    ),
    (
        "parameter unknown key",
        &[
            ("params", "[params]\nk = { nominal = 1, typical = 2 }\n"),
            ("plant", "[plant]\ntransfer = \"k / (s + 1)\"\n"),
        ],
        "params.k.typical",
        &["unknown key"],
    ),
    (
        "parameter named s",
        &[("params", "[params]\ns = 1\n")],
        "params.s",
        &["Laplace variable"],
    ),
    (
        "parameter of the wrong type",
        &[
            ("params", "[params]\nk = \"38\"\n"),
            ("plant", "[plant]\ntransfer = \"k / (s + 1)\"\n"),
        ],
        "params.k",
        &["found a string"],
    ),
    (
        "range that makes the plant improper at a corner",
        &[
            (
                "params",
                "[params]\na = { nominal = 0.5, min = 0, max = 1 }\n",
            ),
            ("plant", "[plant]\ntransfer = \"s / (a*s + 1)\"\n"),
        ],
        "plant.transfer",
        &["with a = 0", "improper plant"],
    ),
    // Unknown keys and wrong types.
    (
        "unknown top-level key",
        &[("top", "title = \"x\"\nauthor = \"me\"\n")],
        "author",
        &["unknown field `author`", "line 2, column 1"],
    ),
    (
        "unknown table",
        &[("budget", "[budgit]\ncpu_hz = 1e6\n")],
        "budgit",
        &["unknown field `budgit`"],
    ),
    (
        "unknown key in spec",
        &[("spec", "[spec]\nmax_overshot_pct = 20\n")],
        "spec.max_overshot_pct",
        &["unknown field"],
    ),
    (
        "unknown key in plant",
        &[("plant", "[plant]\ntransfer = \"1/(s+1)\"\ndelay = 0.1\n")],
        "plant.delay",
        &["unknown field"],
    ),
    (
        "wrong type",
        &[("rates", "[rates]\nmin_hz = \"20\"\nmax_hz = 5000\n")],
        "rates.min_hz",
        &["expected a number"],
    ),
    (
        "unknown spacing",
        &[(
            "rates",
            "[rates]\nmin_hz = 20\nmax_hz = 5000\nspacing = \"lin\"\n",
        )],
        "rates.spacing",
        &["unknown variant `lin`"],
    ),
    // Methods.
    (
        "unknown method",
        &[("methods", "[methods]\nuse = [\"tustin\", \"bilinear\"]\n")],
        "methods.use[1]",
        &["unknown method `bilinear`"],
    ),
    (
        "duplicate method",
        &[(
            "methods",
            "[methods]\nuse = [\"step-invariant\", \"tustin\", \"step-invariant\"]\n",
        )],
        "methods.use[2]",
        &["`step-invariant` is listed twice"],
    ),
    (
        "no methods for a continuous controller",
        &[("methods", "")],
        "methods",
        &["missing", "continuous controller"],
    ),
    (
        "empty method list",
        &[("methods", "[methods]\nuse = []\n")],
        "methods.use",
        &["empty"],
    ),
    (
        "prewarp not positive",
        &[(
            "methods",
            "[methods]\nuse = [\"tustin-prewarped\"]\nprewarp_hz = -8\n",
        )],
        "methods.prewarp_hz",
        &["greater than zero"],
    ),
    (
        "transport delay past any double's Pade (once 'a coefficient is not finite', no field)",
        &[("sensor", "[sensor]\ntransfer = \"1\"\ndelay_s = 1e300\n")],
        "sensor.delay_s",
        &["at most 1e9", "1e300"],
    ),
    // Timing.
    (
        "compute delay negative",
        &[("timing", "[timing]\ncompute_delay = -0.5\n")],
        "timing.compute_delay",
        &[">= 0", "-0.5"],
    ),
    (
        "compute delay negative in a list",
        &[("timing", "[timing]\ncompute_delay = [0, 1.5, -0.1]\n")],
        "timing.compute_delay[2]",
        &[">= 0"],
    ),
    (
        "compute delay infinite",
        &[("timing", "[timing]\ncompute_delay = inf\n")],
        "timing.compute_delay",
        &["finite"],
    ),
    (
        "compute delay not finite",
        &[("timing", "[timing]\ncompute_delay = nan\n")],
        "timing.compute_delay",
        &["finite"],
    ),
    (
        "compute delay empty list",
        &[("timing", "[timing]\ncompute_delay = []\n")],
        "timing.compute_delay",
        &["empty"],
    ),
    (
        "compute delay listed twice",
        &[("timing", "[timing]\ncompute_delay = [0.5, 0.5]\n")],
        "timing.compute_delay[1]",
        &["twice"],
    ),
    // Rates.
    (
        "zero rate",
        &[("rates", "[rates]\nmin_hz = 0\nmax_hz = 5000\n")],
        "rates.min_hz",
        &["greater than zero"],
    ),
    (
        "negative rate",
        &[("rates", "[rates]\nmin_hz = 20\nmax_hz = -5\n")],
        "rates.max_hz",
        &["greater than zero"],
    ),
    (
        "infinite rate",
        &[("rates", "[rates]\nmin_hz = 20\nmax_hz = inf\n")],
        "rates.max_hz",
        &["finite"],
    ),
    (
        "min rate not below max",
        &[("rates", "[rates]\nmin_hz = 500\nmax_hz = 500\n")],
        "rates.max_hz",
        &["above min_hz"],
    ),
    (
        "one point",
        &[("rates", "[rates]\nmin_hz = 20\nmax_hz = 500\npoints = 1\n")],
        "rates.points",
        &["from 2 to 100000"],
    ),
    (
        "too many points",
        &[(
            "rates",
            "[rates]\nmin_hz = 20\nmax_hz = 500\npoints = 100001\n",
        )],
        "rates.points",
        &["from 2 to 100000"],
    ),
    ("no rates", &[("rates", "")], "rates", &["missing"]),
    // Spec.
    (
        "headroom below one",
        &[("spec", "[spec]\nheadroom = 0.9\n")],
        "spec.headroom",
        &["from 1 to 100", "got 0.9"],
    ),
    (
        "headroom absurdly large",
        &[("spec", "[spec]\nheadroom = 1e300\n")],
        "spec.headroom",
        &["from 1 to 100", "got 1e300"],
    ),
    (
        "settling band zero",
        &[("spec", "[spec]\nsettling_band_pct = 0\n")],
        "spec.settling_band_pct",
        &["above 0 and below 100"],
    ),
    (
        "settling band 100",
        &[("spec", "[spec]\nsettling_band_pct = 100\n")],
        "spec.settling_band_pct",
        &["above 0 and below 100"],
    ),
    (
        "negative overshoot limit",
        &[("spec", "[spec]\nmax_overshoot_pct = -1\n")],
        "spec.max_overshoot_pct",
        &["zero or more"],
    ),
    (
        "zero settling time",
        &[("spec", "[spec]\nmax_settling_s = 0\n")],
        "spec.max_settling_s",
        &["greater than zero"],
    ),
    // Budget.
    (
        "cpu clock zero",
        &[(
            "budget",
            "[budget]\ncpu_hz = 0\ncycles_per_update = 900\nmax_load_pct = 25\n",
        )],
        "budget.cpu_hz",
        &["greater than zero"],
    ),
    (
        "cycles negative",
        &[(
            "budget",
            "[budget]\ncpu_hz = 170e6\ncycles_per_update = -900\n",
        )],
        "budget.cycles_per_update",
        &["greater than zero"],
    ),
    (
        "load zero",
        &[(
            "budget",
            "[budget]\ncpu_hz = 170e6\ncycles_per_update = 900\nmax_load_pct = 0\n",
        )],
        "budget.max_load_pct",
        &["at most 100"],
    ),
    (
        "load above 100",
        &[(
            "budget",
            "[budget]\ncpu_hz = 170e6\ncycles_per_update = 900\nmax_load_pct = 150\n",
        )],
        "budget.max_load_pct",
        &["at most 100"],
    ),
    (
        "cost given two ways",
        &[(
            "budget",
            "[budget]\ncpu_hz = 170e6\ncycles_per_update = 900\ncycles_per_mac = 12\n",
        )],
        "budget",
        &["two ways"],
    ),
    (
        "no cost",
        &[("budget", "[budget]\ncpu_hz = 170e6\n")],
        "budget.cycles_per_update",
        &["missing"],
    ),
    (
        "timer clock zero",
        &[(
            "budget",
            "[budget]\ncpu_hz = 170e6\ncycles_per_update = 900\ntimer_hz = 0\n",
        )],
        "budget.timer_hz",
        &["greater than zero"],
    ),
    // Uncertainty.
    (
        "zero samples",
        &[
            (
                "params",
                "[params]\nk = { nominal = 38, min = 30, max = 46 }\n",
            ),
            ("plant", "[plant]\ntransfer = \"k / (s + 1)\"\n"),
            (
                "uncertainty",
                "[uncertainty]\nmode = \"samples\"\nsamples = 0\n",
            ),
        ],
        "uncertainty.samples",
        &["from 1 to"],
    ),
    (
        "unknown uncertainty mode",
        &[
            (
                "params",
                "[params]\nk = { nominal = 38, min = 30, max = 46 }\n",
            ),
            ("plant", "[plant]\ntransfer = \"k / (s + 1)\"\n"),
            ("uncertainty", "[uncertainty]\nmode = \"monte-carlo\"\n"),
        ],
        "uncertainty.mode",
        &["monte-carlo"],
    ),
    (
        "uncertainty without a ranged parameter",
        &[("uncertainty", "[uncertainty]\nmode = \"corners\"\n")],
        "uncertainty",
        &["no [params] to vary"],
    ),
    (
        "more than 2^10 corners",
        &[
            (
                "params",
                "[params]\na = { nominal = 1, min = 0.9, max = 1.1 }\nb = { nominal = 1, min = 0.9, max = 1.1 }\nc = { nominal = 1, min = 0.9, max = 1.1 }\nd = { nominal = 1, min = 0.9, max = 1.1 }\ne = { nominal = 1, min = 0.9, max = 1.1 }\nf = { nominal = 1, min = 0.9, max = 1.1 }\ng = { nominal = 1, min = 0.9, max = 1.1 }\nh = { nominal = 1, min = 0.9, max = 1.1 }\ni = { nominal = 1, min = 0.9, max = 1.1 }\nj = { nominal = 1, min = 0.9, max = 1.1 }\nk = { nominal = 38, min = 30, max = 46 }\n",
            ),
            (
                "plant",
                "[plant]\ntransfer = \"a*b*c*d*e*f*g*h*i*j*k / (s + 1)\"\n",
            ),
            ("uncertainty", "[uncertainty]\nmode = \"corners\"\n"),
        ],
        "uncertainty.mode",
        &["2^11 corners", "1024", "samples"],
    ),
    // Arithmetic.
    (
        "unknown number format",
        &[(
            "uncertainty",
            "[arithmetic]\nformats = [\"f32\", \"int16\"]\n",
        )],
        "arithmetic.formats[1]",
        &["int16", "q15"],
    ),
    (
        "format listed twice",
        &[(
            "uncertainty",
            "[arithmetic]\nformats = [\"q15\", \"q15\"]\n",
        )],
        "arithmetic.formats[1]",
        &["twice"],
    ),
    (
        "no formats",
        &[("uncertainty", "[arithmetic]\nformats = []\n")],
        "arithmetic.formats",
        &["at least one"],
    ),
    (
        "unknown structure",
        &[(
            "uncertainty",
            "[arithmetic]\nformats = [\"q15\"]\nstructure = \"lattice\"\n",
        )],
        "arithmetic.structure",
        &["lattice", "sos"],
    ),
];

#[test]
fn every_bad_input_names_file_and_field() {
    for (what, overrides, field, fragments) in BAD {
        let text = text_with(overrides);
        let err = match parse(&text) {
            Ok(_) => panic!("{what}: accepted\n{text}"),
            Err(e) => e,
        };
        let shown = err.to_string();
        assert!(shown.starts_with(&format!("{FILE}: ")), "{what}: {shown}");
        assert_eq!(err.field(), Some(*field), "{what}: {shown}");
        assert!(
            shown.contains(&format!("field `{field}`")),
            "{what}: {shown}"
        );
        for f in *fragments {
            assert!(shown.contains(f), "{what}: `{f}` not in: {shown}");
        }
    }
}

#[test]
fn expression_errors_show_the_expression_and_a_caret() {
    // "38 / (0.42*s $ 1)": the `$` is the 14th character (counted by hand).
    let text = text_with(&[("plant", "[plant]\ntransfer = \"38 / (0.42*s $ 1)\"\n")]);
    let err = parse(&text).unwrap_err();
    match &err {
        CaseError::Expression {
            column, expression, ..
        } => {
            assert_eq!(*column, 14);
            assert_eq!(expression, "38 / (0.42*s $ 1)");
        }
        other => panic!("wrong kind: {other:?}"),
    }
    let shown = err.to_string();
    assert_eq!(
        shown,
        concat!(
            "cases/belt.toml: field `plant.transfer`: column 14: unexpected character `$`\n",
            "    38 / (0.42*s $ 1)\n",
            "                 ^",
        )
    );
}

#[test]
fn toml_syntax_errors_give_line_and_column() {
    // Line 2 has an unterminated array; the parser reports its position.
    let err = parse("title = \"x\"\nuse = [1,\n").unwrap_err();
    match &err {
        CaseError::Syntax { line, column, .. } => {
            assert_eq!(*line, 2);
            assert!(*column >= 7, "{err}");
        }
        other => panic!("wrong kind: {other:?}"),
    }
    assert!(
        err.to_string()
            .starts_with("cases/belt.toml: line 2, column ")
    );
    // A bare word where a value belongs.
    let err = parse("title = x\n").unwrap_err();
    assert!(
        matches!(
            err,
            CaseError::Syntax {
                line: 1,
                column: 9,
                ..
            }
        ),
        "{err}"
    );
}

#[test]
fn missing_file_names_the_file() {
    let err = Case::load(Path::new("no/such/dir/case.toml")).unwrap_err();
    assert!(matches!(err, CaseError::Read { .. }));
    assert!(
        err.to_string()
            .starts_with("no/such/dir/case.toml: cannot read")
    );
}

// ----------------------------------------------------------- valid input

#[test]
fn belt_conveyor_models_by_hand() {
    let case = ok(&[]);
    assert_eq!(case.title, "Belt conveyor speed loop");
    let m = case.nominal().unwrap();
    // 38 / ((0.42 s + 1)(0.004 s + 1)):
    // (0.42 s + 1)(0.004 s + 1) = 0.00168 s^2 + (0.42 + 0.004) s + 1.
    close(m.plant.numerator.coeffs(), &[38.0]);
    close(m.plant.denominator.coeffs(), &[1.0, 0.424, 0.00168]);
    // Sensor 1 / (0.0008 s + 1).
    close(m.sensor.numerator.coeffs(), &[1.0]);
    close(m.sensor.denominator.coeffs(), &[1.0, 0.0008]);
    // 0.05 (s + 12) / s = (0.6 + 0.05 s) / s.
    let Controller::Continuous(c) = &m.controller else {
        panic!("expected a continuous controller");
    };
    close(c.numerator.coeffs(), &[0.6, 0.05]);
    close(c.denominator.coeffs(), &[0.0, 1.0]);
    assert_eq!(case.compute_delays, vec![0.5]);
    assert_eq!(
        case.methods,
        vec![Method::Tustin, Method::PoleZeroMatch, Method::StepInvariant]
    );
    assert_eq!(case.spec.max_overshoot_pct, Some(20.0));
}

#[test]
fn defaults() {
    let text = "[plant]\ntransfer = \"1/(s+1)\"\n[controller]\ntransfer = \"2\"\n\
                [rates]\nmin_hz = 10\nmax_hz = 1000\n[methods]\nuse = [\"step-invariant\"]\n";
    let case = Case::parse(text, Path::new("cases/first-order.toml")).unwrap();
    assert_eq!(case.title, "first-order");
    assert!(case.params.is_empty());
    assert_eq!(case.compute_delays, vec![0.0]);
    assert_eq!(case.rates.points, 200);
    assert_eq!(case.rates.spacing, Spacing::Log);
    assert_eq!(case.prewarp_hz, None);
    assert_eq!(case.spec.settling_band_pct, 2.0);
    assert_eq!(case.spec.headroom, 1.25);
    assert_eq!(case.spec.max_settling_s, None);
    assert_eq!(case.budget, None);
    assert_eq!(case.uncertainty, None);
    let m = case.nominal().unwrap();
    assert_eq!(m.sensor.numerator.coeffs(), &[1.0]);
    assert_eq!(m.sensor.denominator.coeffs(), &[1.0]);
}

#[test]
fn pid_expansion_by_hand() {
    // kp = 2, ki = 10, kd = 0.1, filter at 50/pi Hz so wf = 2 pi f = 100 rad/s:
    // C = 2 + 10/s + 0.1 s / (1 + s/100)
    //   = [2 s (1 + 0.01 s) + 10 (1 + 0.01 s) + 0.1 s^2] / [s (1 + 0.01 s)]
    //   = (10 + 2.1 s + 0.12 s^2) / (s + 0.01 s^2).
    let f = 50.0 / std::f64::consts::PI;
    let body = format!(
        "[controller]\npid = {{ kp = 2, ki = 10, kd = 0.1, derivative_filter_hz = {f:?} }}\n"
    );
    let case = ok(&[("controller", &body)]);
    let Controller::Continuous(c) = case.nominal().unwrap().controller else {
        panic!("expected a continuous controller");
    };
    close(c.numerator.coeffs(), &[10.0, 2.1, 0.12]);
    close(c.denominator.coeffs(), &[0.0, 1.0, 0.01]);

    // PI only: 3 + 6/s = (3 s + 6) / s.
    let case = ok(&[("controller", "[controller]\npid = { kp = 3, ki = 6 }\n")]);
    let Controller::Continuous(c) = case.nominal().unwrap().controller else {
        panic!("expected a continuous controller");
    };
    close(c.numerator.coeffs(), &[6.0, 3.0]);
    close(c.denominator.coeffs(), &[0.0, 1.0]);
}

#[test]
fn zeros_poles_gain_by_hand() {
    // 5 (s + 2) / ((s + 1)(s^2 + 6 s + 25)), poles -1 and -3 +- 4j:
    // (s + 1)(s^2 + 6 s + 25) = s^3 + 7 s^2 + 31 s + 25; numerator 5 s + 10.
    let case = ok(&[(
        "plant",
        "[plant]\nzeros = [\"-2\"]\npoles = [-1, \"-3+4j\", \"-3 - 4j\"]\ngain = 5\n",
    )]);
    let m = case.nominal().unwrap();
    close(m.plant.numerator.coeffs(), &[10.0, 5.0]);
    close(m.plant.denominator.coeffs(), &[25.0, 31.0, 7.0, 1.0]);

    // Purely imaginary pair and default gain 1: 1 / (s^2 + 4).
    let case = ok(&[("sensor", "[sensor]\npoles = [\"2j\", \"-2j\"]\n")]);
    let m = case.nominal().unwrap();
    close(m.sensor.numerator.coeffs(), &[1.0]);
    close(m.sensor.denominator.coeffs(), &[4.0, 0.0, 1.0]);
}

#[test]
fn discrete_controller() {
    let case = ok(&[
        (
            "controller",
            "[controller]\nnumerator_z = [0.5, -0.4]\ndenominator_z = [1, -1]\nrate_hz = 1000\n",
        ),
        ("methods", ""),
    ]);
    assert!(case.methods.is_empty());
    let Controller::Discrete(d) = case.nominal().unwrap().controller else {
        panic!("expected a discrete controller");
    };
    assert_eq!(d.period_s, 1e-3);
    // Descending [0.5, -0.4] is 0.5 z - 0.4: ascending [-0.4, 0.5].
    assert_eq!(d.transfer.numerator.coeffs(), &[-0.4, 0.5]);
    assert_eq!(d.transfer.denominator.coeffs(), &[-1.0, 1.0]);
}

#[test]
fn parameters_in_file_order_and_models_at() {
    let case = ok(&[
        (
            "params",
            "[params]\nk = { nominal = 38, min = 30, max = 46 }\ntau = 0.42\n",
        ),
        (
            "plant",
            "[plant]\ntransfer = \"k / ((tau*s + 1) * (0.004*s + 1))\"\n",
        ),
        (
            "uncertainty",
            "[uncertainty]\nmode = \"samples\"\nsamples = 50\n",
        ),
    ]);
    let names: Vec<&str> = case.params.iter().map(|p| p.name.as_str()).collect();
    assert_eq!(names, ["k", "tau"], "file order, not alphabetical");
    assert_eq!((case.params[0].min, case.params[0].max), (30.0, 46.0));
    assert_eq!((case.params[1].min, case.params[1].max), (0.42, 0.42));
    assert_eq!(
        case.uncertainty,
        Some(UncertaintyMode::Samples {
            samples: 50,
            seed: 0
        })
    );
    // Nominal: same polynomials as the literal belt case.
    let m = case.nominal().unwrap();
    close(m.plant.numerator.coeffs(), &[38.0]);
    close(m.plant.denominator.coeffs(), &[1.0, 0.424, 0.00168]);
    // k = 30, tau = 0.5: den (0.5 s + 1)(0.004 s + 1) = 0.002 s^2 + 0.504 s + 1.
    let m = case.models_at(&[30.0, 0.5]).unwrap();
    close(m.plant.numerator.coeffs(), &[30.0]);
    close(m.plant.denominator.coeffs(), &[1.0, 0.504, 0.002]);
    // Wrong count of values.
    let err = case.models_at(&[30.0]).unwrap_err();
    assert_eq!(err.field(), Some("params"));
    // A value that breaks the model is reported with the values used.
    let err = case.models_at(&[30.0, f64::NAN]).unwrap_err();
    assert!(err.to_string().contains("with k = 30, tau = NaN"), "{err}");
    assert_eq!(err.field(), Some("plant.transfer"));
}

#[test]
fn parameter_order_follows_the_file_when_not_alphabetical() {
    let case = ok(&[
        ("params", "[params]\nzeta = 0.7\nalpha = 2\n"),
        (
            "plant",
            "[plant]\ntransfer = \"alpha / (s^2 + 2*zeta*s + 1)\"\n",
        ),
    ]);
    let names: Vec<&str> = case.params.iter().map(|p| p.name.as_str()).collect();
    assert_eq!(names, ["zeta", "alpha"]);
    // alpha / (s^2 + 1.4 s + 1).
    let m = case.models_at(&[0.7, 2.0]).unwrap();
    close(m.plant.numerator.coeffs(), &[2.0]);
    close(m.plant.denominator.coeffs(), &[1.0, 1.4, 1.0]);
}

#[test]
fn full_file_with_budget_and_lists() {
    let case = ok(&[
        ("timing", "[timing]\ncompute_delay = [0, 0.5, 1]\n"),
        (
            "rates",
            "[rates]\nmin_hz = 20\nmax_hz = 5000\npoints = 5\nspacing = \"linear\"\n",
        ),
        (
            "methods",
            "[methods]\nuse = [\"tustin-prewarped\", \"backward-euler\"]\nprewarp_hz = 8\n",
        ),
        (
            "spec",
            "[spec]\nmax_overshoot_pct = 20\nmax_settling_s = 0.3\nsettling_band_pct = 5\n\
             min_phase_margin_deg = 40\nmin_gain_margin_db = 6\nmax_sensitivity_peak = 2.0\n\
             max_rise_s = 0.05\nmax_recovery_s = 0.5\nmax_disturbance_peak = 0.1\n\
             max_u_peak = 10\nheadroom = 1.5\n",
        ),
        (
            "budget",
            "[budget]\ncpu_hz = 170e6\ncycles_per_mac = 12\noverhead_cycles = 300\n\
             max_load_pct = 25\ntimer_hz = 170e6\n",
        ),
    ]);
    assert_eq!(case.compute_delays, vec![0.0, 0.5, 1.0]);
    assert_eq!(case.rates.spacing, Spacing::Linear);
    assert_eq!(
        case.methods,
        vec![Method::TustinPrewarped, Method::BackwardEuler]
    );
    assert_eq!(case.prewarp_hz, Some(8.0));
    let s = &case.spec;
    assert_eq!(s.settling_band_pct, 5.0);
    assert_eq!(s.min_phase_margin_deg, Some(40.0));
    assert_eq!(s.min_gain_margin_db, Some(6.0));
    assert_eq!(s.max_sensitivity_peak, Some(2.0));
    assert_eq!(s.max_rise_s, Some(0.05));
    assert_eq!(s.max_recovery_s, Some(0.5));
    assert_eq!(s.max_disturbance_peak, Some(0.1));
    assert_eq!(s.max_u_peak, Some(10.0));
    assert_eq!(s.headroom, 1.5);
    let b = case.budget.as_ref().unwrap();
    assert_eq!(b.cpu_hz, 170e6);
    assert_eq!(
        b.cycles,
        Cycles::Estimate {
            cycles_per_mac: 12.0,
            overhead_cycles: 300.0
        }
    );
    assert_eq!(b.max_load_pct, 25.0);
    assert_eq!(b.timer_hz, Some(170e6));

    let case = ok(&[(
        "budget",
        "[budget]\ncpu_hz = 64e6\ncycles_per_update = 900\n",
    )]);
    let b = case.budget.unwrap();
    assert_eq!(b.cycles, Cycles::PerUpdate(900.0));
    assert_eq!(b.max_load_pct, 100.0);
}

#[test]
fn load_reads_a_file() {
    let dir = std::env::temp_dir().join(format!("looprate-case-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("belt.toml");
    std::fs::write(&path, text_with(&[])).unwrap();
    let case = Case::load(&path).unwrap();
    assert_eq!(case.source, path);
    let bad = dir.join("bad.toml");
    std::fs::write(
        &bad,
        text_with(&[("rates", "[rates]\nmin_hz = 0\nmax_hz = 1\n")]),
    )
    .unwrap();
    let err = Case::load(&bad).unwrap_err();
    assert!(
        err.to_string()
            .starts_with(&format!("{}: field `rates.min_hz`", bad.display())),
        "{err}"
    );
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn rate_grids() {
    let log = Rates {
        min_hz: 20.0,
        max_hz: 5000.0,
        points: 200,
        spacing: Spacing::Log,
    };
    let g = log.grid();
    assert_eq!(g.len(), 200);
    assert_eq!(g[0], 20.0);
    assert_eq!(g[199], 5000.0);
    // Equal ratios: (5000/20)^(1/199) between neighbours.
    let ratio = 250f64.powf(1.0 / 199.0);
    for w in g.windows(2) {
        assert!(w[1] > w[0]);
        assert!((w[1] / w[0] - ratio).abs() < 1e-12);
    }
    let lin = Rates {
        min_hz: 10.0,
        max_hz: 50.0,
        points: 5,
        spacing: Spacing::Linear,
    };
    assert_eq!(lin.grid(), vec![10.0, 20.0, 30.0, 40.0, 50.0]);
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(500))]

    /// Whatever text sits in an expression field, loading returns a value
    /// or an error that names the field; it never panics.
    #[test]
    fn any_plant_expression_loads_or_names_the_field(tf in ".{0,60}") {
        let quoted = toml::Value::String(tf.clone()).to_string();
        let body = format!("[plant]\ntransfer = {quoted}\n");
        let text = text_with(&[("plant", &body)]);
        if let Err(e) = parse(&text) {
            proptest::prop_assert_eq!(e.field(), Some("plant.transfer"), "{}", e);
        }
    }

    /// Arbitrary bytes of TOML never panic the loader.
    #[test]
    fn any_text_loads_or_errors(text in "(\\PC|\n|\\[|\\]|=|\"){0,200}") {
        let _ = parse(&text);
    }
}

// Sanity notes: valid values that look like a slip are noted, never refused
// (the 1 MHz floor for a CPU clock is common practice, no source).
#[test]
fn sanity_notes_for_a_clock_in_mhz_and_a_range_only_the_controller_sees() {
    let text = "[plant]\ntransfer = \"k/(s+1)\"\n[controller]\ntransfer = \"g*(s+2)/s\"\n\
        [params]\nk = 1\ng = { nominal = 1, min = 0.5, max = 2 }\n[uncertainty]\nmode = \"corners\"\n\
        [budget]\ncpu_hz = 72\ncycles_per_update = 100\n[rates]\nmin_hz = 10\nmax_hz = 100\npoints = 5\n\
        [methods]\nuse = [\"tustin\"]\n";
    let c = parse(text).unwrap();
    assert_eq!(c.notes.len(), 2, "{:?}", c.notes);
    assert!(c.notes[0].contains("budget.cpu_hz") && c.notes[0].contains("MHz"));
    assert!(c.notes[1].contains("params.g") && c.notes[1].contains("only in the controller"));
    // The same case with the range on the plant and a real clock: no notes.
    let plain = text
        .replace(
            "k = 1\ng = { nominal = 1, min = 0.5, max = 2 }",
            "g = 1\nk = { nominal = 1, min = 0.5, max = 2 }",
        )
        .replace("cpu_hz = 72", "cpu_hz = 72e6");
    assert!(parse(&plain).unwrap().notes.is_empty());
}
