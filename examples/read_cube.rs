//! Reads a whole cube and prints one JSON line: wall seconds of the read, peak resident
//! memory of the process (VmHWM), and the cube's f32 size. Used by
//! `benches/read_vs_astropy.py`; not part of the tool.
//!
//! Usage: cargo run --release --example read_cube -- CUBE [THREADS]

use std::time::Instant;

fn main() -> anyhow::Result<()> {
    let mut args = std::env::args().skip(1);
    let path = args
        .next()
        .ok_or_else(|| anyhow::anyhow!("usage: read_cube CUBE [THREADS]"))?;
    if let Some(threads) = args.next() {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads.parse()?)
            .build_global()?;
    }
    let start = Instant::now();
    let cube = thiomap::cube::load(path.as_ref(), &Default::default())?;
    let seconds = start.elapsed().as_secs_f64();
    // Touch the result so the read cannot be optimised away.
    let checksum: f64 = cube.data.iter().step_by(4099).map(|v| *v as f64).sum();
    println!(
        "{{\"seconds\": {seconds:.4}, \"peak_rss_bytes\": {}, \"cube_f32_bytes\": {}, \"checksum\": {checksum}}}",
        thiomap::results::peak_rss_bytes(),
        cube.info.f32_bytes()
    );
    Ok(())
}
