//! Side by side with gco (run by `benches/smooth_vs_gco.sh`): builds the default smoothing
//! energy of a demo-like map (see `support/demo_map.rs`), rounds it to integers (× 1000) so
//! both solvers minimise exactly the same energy, writes it for `smooth_vs_gco.py`, and times
//! grove's alpha-expansion on it (and mean-field on the same map).
//!
//! Output file (little-endian): width, height, labels, connectivity (u32 each), then the
//! unary costs (i32, pixel-major) and the forward edge weights (i32, 4 per pixel: E, S, SE, SW).

use std::io::Write;
use std::time::Instant;

use grove::smooth::expansion::{alpha_expansion, alpha_expansion_with};
use grove::smooth::maxflow::FlowStart;
use grove::smooth::meanfield::mean_field;
use grove::smooth::{contrast_beta, PottsEnergy, SmoothSettings};

#[path = "support/demo_map.rs"]
mod demo_map;

/// CPU seconds used by the process so far: on a shared, overloaded machine this is the
/// steadier figure (wall time ≈ CPU time for the sequential expansion, ≈ CPU / threads for
/// mean-field on an idle machine).
fn cpu_seconds() -> f64 {
    let mut t = libc::timespec {
        tv_sec: 0,
        tv_nsec: 0,
    };
    // SAFETY: clock_gettime writes into the timespec we own.
    unsafe { libc::clock_gettime(libc::CLOCK_PROCESS_CPUTIME_ID, &mut t) };
    t.tv_sec as f64 + t.tv_nsec as f64 * 1e-9
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(|a, b| a.partial_cmp(b).unwrap());
    v[v.len() / 2]
}

fn main() {
    let mut args = std::env::args().skip(1);
    let out = args
        .next()
        .expect("usage: smooth_vs_gco OUT.bin [SIZE] [RUNS]");
    let size: usize = args.next().map_or(1024, |s| s.parse().unwrap());
    let runs: usize = args.next().map_or(3, |s| s.parse().unwrap());
    let map = demo_map::demo_map(size);
    let s = SmoothSettings::default();
    let beta = contrast_beta(&map.lab);
    let e = PottsEnergy::from_probabilities(&map.probs, &map.lab, s.strength, s.unary_floor, beta);
    let round = |v: &[f32]| -> Vec<f32> { v.iter().map(|x| (x * 1000.0).round()).collect() };
    let e = PottsEnergy::new(
        e.width,
        e.height,
        e.n_labels,
        e.connectivity,
        round(&e.unary),
        round(&e.weights),
    );

    let mut f = std::io::BufWriter::new(std::fs::File::create(&out).unwrap());
    for v in [e.width, e.height, e.n_labels, 8] {
        f.write_all(&(v as u32).to_le_bytes()).unwrap();
    }
    for v in e.unary.iter().chain(&e.weights) {
        f.write_all(&(*v as i32).to_le_bytes()).unwrap();
    }
    f.flush().unwrap();

    let mp = (e.width * e.height) as f64 / 1e6;
    // The two max-flow starts on the same expansion graphs, alternating run by run so that
    // load from other processes hits both alike.
    let (mut trees, mut short) = (Vec::new(), Vec::new());
    let (mut r_trees, mut r_short) = (None, None);
    for _ in 0..runs {
        let (t, r) = timed_once(|| alpha_expansion(&e));
        trees.push(t);
        r_trees = Some(r);
        let (t, r) =
            timed_once(|| alpha_expansion_with(&e, e.unary_argmin(), FlowStart::ShortPaths));
        short.push(t);
        r_short = Some(r);
    }
    let (r, rs) = (r_trees.unwrap(), r_short.unwrap());
    let (wall, cpu) = medians(&trees);
    println!(
        "grove expansion: wall {wall:.3} s, cpu {cpu:.3} s (median of {runs}; {:.3} wall s/MP), \
         energy {}, {} cuts, start energy {}",
        wall / mp,
        r.energy,
        r.cuts,
        r.history[0]
    );
    let (swall, scpu) = medians(&short);
    let ratios: Vec<f64> = short.iter().zip(&trees).map(|(s, t)| s.0 / t.0).collect();
    println!(
        "grove expansion, short-path start: wall {swall:.3} s, cpu {scpu:.3} s (median; {:.3} \
         wall s/MP), energy {}; wall short-path / trees per run, median {:.3}",
        swall / mp,
        rs.energy,
        median(ratios)
    );
    let (wall, cpu, _) = timed(runs, || mean_field(&e, 5, None));
    println!(
        "grove mean-field (5 iterations): wall {wall:.3} s, cpu {cpu:.3} s (median; {:.3} wall s/MP)",
        wall / mp
    );
}

/// Wall and CPU seconds of one call, and its result.
fn timed_once<T>(f: impl FnOnce() -> T) -> ((f64, f64), T) {
    let (t, c) = (Instant::now(), cpu_seconds());
    let r = std::hint::black_box(f());
    ((t.elapsed().as_secs_f64(), cpu_seconds() - c), r)
}

fn medians(v: &[(f64, f64)]) -> (f64, f64) {
    (
        median(v.iter().map(|x| x.0).collect()),
        median(v.iter().map(|x| x.1).collect()),
    )
}

/// Median wall and CPU seconds of `runs` calls, and the last result.
fn timed<T>(runs: usize, mut f: impl FnMut() -> T) -> (f64, f64, T) {
    let (mut wall, mut cpu, mut last) = (Vec::new(), Vec::new(), None);
    for _ in 0..runs {
        let (t, c) = (Instant::now(), cpu_seconds());
        last = Some(std::hint::black_box(f()));
        wall.push(t.elapsed().as_secs_f64());
        cpu.push(cpu_seconds() - c);
    }
    (median(wall), median(cpu), last.expect("at least one run"))
}
