//! A full sweep of the largest demo case (gimbal axis: 200 rates x 8
//! methods x 3 delays) and a pick (sweep + search) of the belt conveyor.

use std::path::PathBuf;

use criterion::{Criterion, criterion_group, criterion_main};
use looprate::case::Case;
use looprate::pick::{case_grid, pick, prepare};
use looprate::search::Silent;
use looprate::sweep;

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
    let belt = demo("belt-conveyor.toml");
    let lp = prepare(&belt).expect("prepare");
    let points = case_grid(&belt, &lp);
    g.bench_function(
        format!("pick belt-conveyor ({} points + search)", points.len()),
        |b| {
            b.iter(|| {
                let rows = sweep::run(
                    &sweep::Plan::nominal(&lp, &belt.spec, belt.budget.as_ref()),
                    &points,
                    &|| {},
                );
                pick(&belt, &lp, None, &rows, &Silent)
            })
        },
    );
    g.finish();
}

criterion_group!(benches, sweeps);
criterion_main!(benches);
