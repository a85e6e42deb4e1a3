//! Criterion benchmark of problem P1 (see `dosemill_engine::benchmarks`).

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use dosemill_engine::benchmarks;
use dosemill_engine::transport::{run, RunSettings};

fn p1(c: &mut Criterion) {
    let problem = benchmarks::p1(vec![]);
    let histories = 100_000;
    let mut group = c.benchmark_group("P1");
    group.throughput(Throughput::Elements(histories));
    group.sample_size(10);
    group.bench_function("60keV_pencil_20cm_water_1thread", |b| {
        b.iter(|| run(&problem, &RunSettings { histories, seed: 1, chunk_histories: 10_000, threads: 1, progress: false }))
    });
    group.finish();
}

criterion_group!(benches, p1);
criterion_main!(benches);
