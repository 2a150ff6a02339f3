//! Times each routine behind the backend seam under faer and under LAPACK
//! (OpenBLAS) in one run, on `p x p` problems of p = 100, 500 and 1000, and
//! prints the ratios (time under faer / time under LAPACK: above 1 LAPACK
//! is faster). The per-routine choice in `src/linalg/backend/mod.rs` follows
//! these ratios.
//!
//! ```text
//! OPENBLAS_NUM_THREADS=1 cargo run --release --features lapack-openblas-system --example backend_kernels
//! ```

fn main() {
    if !leastline::Backend::Lapack.available() {
        eprintln!(
            "backend_kernels compares faer with LAPACK: build it with \
             --features lapack-openblas-system (or lapack-openblas-static)"
        );
        std::process::exit(2);
    }
    let sizes = [100usize, 500, 1000];
    println!(
        "{:<26} {:>10} {:>10} {:>10}   (faer time / lapack time, best of 5, one thread each)",
        "routine", "p = 100", "p = 500", "p = 1000"
    );
    let mut rows: Vec<(&'static str, Vec<f64>)> = Vec::new();
    for &p in &sizes {
        let reps = if p >= 1000 { 3 } else { 5 };
        let faer = leastline::bench_support::backend_kernels(leastline::Backend::Faer, p, reps)
            .unwrap_or_else(|e| {
                eprintln!("faer at p = {p}: {e}");
                std::process::exit(1)
            });
        let lapack = leastline::bench_support::backend_kernels(leastline::Backend::Lapack, p, reps)
            .unwrap_or_else(|e| {
                eprintln!("lapack at p = {p}: {e}");
                std::process::exit(1)
            });
        for (i, ((name, tf), (_, tl))) in faer.iter().zip(&lapack).enumerate() {
            if rows.len() <= i {
                rows.push((name, Vec::new()));
            }
            rows[i].1.push(tf / tl);
        }
    }
    for (name, ratios) in rows {
        print!("{name:<26}");
        for r in ratios {
            print!(" {r:>10.2}");
        }
        println!();
    }
}
