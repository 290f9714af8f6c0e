//! A full sweep of the largest demo case (gimbal axis: 200 rates x 8
//! methods x 3 delays), and picks (sweep + search) of the belt conveyor:
//! nominal, with its plant variants, and with its coefficient formats.

use std::path::PathBuf;

use criterion::{Criterion, criterion_group, criterion_main};
use looprate::case::Case;
use looprate::explore::pick::{case_grid, prepare, sweep_and_pick};
use looprate::explore::search::Silent;
use looprate::explore::sweep;

fn demo(name: &str) -> Case {
    Case::load(
        &PathBuf::from(env!("CARGO_MANIFEST_DIR"))
            .join("demo-cases")
            .join(name),
    )
    .expect("demo case")
}

fn sweeps(c: &mut Criterion) {
    let mut g = c.benchmark_group("demo cases");
    g.sample_size(10);
    let gimbal = demo("gimbal-axis.toml");
    let lp = prepare(&gimbal).expect("prepare");
    let points = case_grid(&gimbal, &lp);
    g.bench_function(
        format!("sweep gimbal-axis ({} points)", points.len()),
        |b| {
            b.iter(|| {
                sweep::run(
                    &sweep::Plan::nominal(&lp, &gimbal.spec, gimbal.budget.as_ref()),
                    &points,
                    &|| {},
                )
            })
        },
    );
    // The belt conveyor as shipped (3 plant variants, q15 and f32
    // coefficients), and stripped to the nominal loop and to the variants
    // alone: the ratios are the cost of a variant and of a format.
    let full = demo("belt-conveyor.toml");
    let mut variants_only = full.clone();
    variants_only.arithmetic = None;
    let mut nominal = variants_only.clone();
    nominal.uncertainty = None;
    for (label, case) in [
        ("nominal", &nominal),
        ("3 variants", &variants_only),
        ("3 variants + q15, f32", &full),
    ] {
        let lp = prepare(case).expect("prepare");
        let points = case_grid(case, &lp).len();
        g.bench_function(
            format!("pick belt-conveyor {label} ({points} points + search)"),
            |b| b.iter(|| sweep_and_pick(case, &lp, &|| {}, &Silent).expect("pick")),
        );
    }
    g.finish();
}

criterion_group!(benches, sweeps);
criterion_main!(benches);
