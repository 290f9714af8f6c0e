//! What a hold kind costs in a sweep, next to what a method costs: the
//! hold-comparison demo case swept with one method and one hold (the
//! base), with a second method added, and with a second hold added
//! (zero-order + first-order, where the ramp adds a Van Loan integral
//! per group and a state when a ramp is still running at the sample), and
//! each hold alone.

use std::path::PathBuf;

use criterion::{Criterion, criterion_group, criterion_main};
use looprate::case::Case;
use looprate::discretize::Method;
use looprate::hold::HoldKind;
use looprate::pick::{case_grid, prepare};
use looprate::sweep;

fn demo(name: &str) -> Case {
    Case::load(
        &PathBuf::from(env!("CARGO_MANIFEST_DIR"))
            .join("demo-cases")
            .join(name),
    )
    .expect("demo case")
}

fn hold_cost(c: &mut Criterion) {
    let mut g = c.benchmark_group("hold kinds");
    g.sample_size(10);
    let base = demo("hold-comparison.toml");
    let variants: Vec<(String, Vec<Method>, Vec<HoldKind>)> = vec![
        (
            "tustin, zero-order".into(),
            vec![Method::Tustin],
            vec![HoldKind::ZeroOrder],
        ),
        (
            "tustin + zoh, zero-order (a method more)".into(),
            vec![Method::Tustin, Method::StepInvariant],
            vec![HoldKind::ZeroOrder],
        ),
        (
            "tustin, zero-order + first-order (a hold more)".into(),
            vec![Method::Tustin],
            vec![HoldKind::ZeroOrder, HoldKind::FirstOrder],
        ),
        (
            "tustin, first-order".into(),
            vec![Method::Tustin],
            vec![HoldKind::FirstOrder],
        ),
        (
            "tustin, interpolating".into(),
            vec![Method::Tustin],
            vec![HoldKind::Interpolating],
        ),
    ];
    for (label, methods, holds) in variants {
        let mut case = base.clone();
        case.methods = methods;
        case.holds = holds;
        let lp = prepare(&case).expect("prepare");
        let points = case_grid(&case, &lp);
        let plan = sweep::Plan::nominal(&lp, &case.spec, case.budget.as_ref());
        g.bench_function(format!("sweep {label} ({} points)", points.len()), |b| {
            b.iter(|| sweep::run(&plan, &points, &|| {}))
        });
    }
    g.finish();
}

criterion_group!(benches, hold_cost);
criterion_main!(benches);
