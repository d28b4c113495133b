//! Criterion micro-benchmarks of the receiver's stages, for developers: the read floor, each
//! truncated pipeline of `slotwise bench` (unwrap; + delay and locate; + gate lookup; +
//! numbering) and the whole `Receiver::push_block`, with the recovered and the reference clock,
//! on the steady state of the default bench link (after lock and alignment).
//!
//! Run with `cargo bench -p slotwise-sim --bench stages` (not part of CI; figures for reports
//! come from `slotwise bench` and scripts/bench-pipeline-callgrind.sh).

use criterion::{criterion_group, criterion_main, BatchSize, Criterion, Throughput};
use slotwise_sim::bench_pipeline::stages::{self, CountSink, Depth, ReplayAnswers};
use slotwise_sim::bench_pipeline::{prepare, warm_up, CaptureName, PipelineArgs};
use slotwise_sim::clocks::ClockMode;

fn stage_benches(c: &mut Criterion) {
    let args = PipelineArgs {
        quick: true,
        block: 1024,
        detections: Some(100_000),
        ..PipelineArgs::default()
    };
    let (p, recovered) = prepare(CaptureName::Default, &args).expect("bench capture");
    let (reference, _) = warm_up(
        &p.scenario,
        ClockMode::Reference,
        &p.events[..p.end],
        Some(p.cut),
        args.block,
    )
    .expect("reference warm-up");
    let timed = &p.events[p.cut..p.end];
    let mut g = c.benchmark_group("default-link");
    g.throughput(Throughput::Elements(timed.len() as u64));
    g.sample_size(20);
    g.bench_function("read floor", |b| b.iter(|| stages::read_floor(timed)));
    for (name, warm) in [("recovered", &recovered), ("reference", &reference)] {
        for d in Depth::ALL {
            g.bench_function(format!("{name}/{}", d.stage()), |b| {
                b.iter_batched_ref(
                    || warm.stages.clone(),
                    |st| stages::truncated(st, timed, d),
                    BatchSize::LargeInput,
                )
            });
        }
        g.bench_function(format!("{name}/push_block"), |b| {
            b.iter_batched_ref(
                || (warm.rx.clone(), ReplayAnswers::new(&warm.answers, 0)),
                |(rx, tx)| {
                    stages::measured_pipeline(rx, tx, &mut CountSink::default(), timed, 1024)
                },
                BatchSize::LargeInput,
            )
        });
    }
    g.finish();
}

criterion_group!(benches, stage_benches);
criterion_main!(benches);
