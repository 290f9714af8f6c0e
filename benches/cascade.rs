//! Cost of a cascade pick against a single-loop pick of the same inner
//! grid: the motor-drive demo with 100 inner rates and its 12 ratios. The
//! cascade's search (`cascade_rows` + `cascade_pick`, which then evaluates
//! the inner loop itself at every inner rate) is timed alone, and the
//! whole cascade pick as `looprate pick` runs it: the inner loop's sweep,
//! which hands its evaluations to the cascade's search
//! (`InnerEvaluations`), then the inner loop's pick (search,
//! recommendation) beside the cascade's search. Target: the whole cascade
//! pick under 3x the single-loop pick.

use std::path::PathBuf;

use criterion::{Criterion, criterion_group, criterion_main};
use looprate::case::Case;
use looprate::explore::cascade::{
    InnerEvaluations, cascade_pick, cascade_rows, prepare_cascade, search_cascade,
};
use looprate::explore::pick::{prepare, sweep_and_pick, sweep_streaming};
use looprate::explore::search::Silent;

fn case() -> Case {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("demo-cases")
        .join("motor-drive-cascade.toml");
    let text = std::fs::read_to_string(&path)
        .expect("demo case")
        .replace("points = 40", "points = 100");
    Case::parse(&text, &path).expect("demo case")
}

fn picks(c: &mut Criterion) {
    let mut g = c.benchmark_group("cascade");
    g.sample_size(10);
    let cascade = case();
    let outer = cascade.outer.as_ref().expect("[outer]");
    assert_eq!(cascade.rates.points, 100);
    assert_eq!(outer.ratios.len(), 12);
    let mut single = cascade.clone();
    single.outer = None;
    let lp = prepare(&single).expect("prepare");
    let pc = prepare_cascade(&cascade)
        .expect("prepare")
        .expect("cascade");
    g.bench_function("single-loop pick, 100 inner rates", |b| {
        b.iter(|| sweep_and_pick(&single, &lp, &|| {}, &Silent).expect("pick"))
    });
    g.bench_function("cascade search, 100 inner rates x 12 ratios", |b| {
        b.iter(|| {
            let rows = cascade_rows(&cascade, &pc, false);
            cascade_pick(&cascade, &pc, &rows)
        })
    });
    // As `looprate pick` runs it: the inner sweep, then the inner pick
    // beside the cascade's search (both read the sweep only).
    g.bench_function("cascade pick (inner pick + cascade search)", |b| {
        b.iter(|| {
            let mut known = InnerEvaluations::default();
            let swept = sweep_streaming(&cascade, &lp, &|| {}, &mut |_, row, _| known.push(row))
                .expect("sweep");
            rayon::join(
                || swept.pick(&cascade, &lp, &Silent).report,
                || search_cascade(&cascade, &pc, &known).pick,
            )
        })
    });
    g.finish();
}

criterion_group!(benches, picks);
criterion_main!(benches);
