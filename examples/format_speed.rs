//! Read speed of the formats of issue 15 against `.npy`, at 2^22 samples per axis (two axes):
//! `.npy`, `.npz` with a stored member and with a deflated one, gzip-compressed `.npy`, plain
//! CSV and gzip-compressed CSV, and a semicolon CSV with decimal commas, all holding the same
//! simulated record (an invented bead of the "kittiwake" instrument). Each is read with
//! `ingest::parse` from bytes in memory; the medians of five reads are printed as one JSON
//! object per line with the input size, the time and the rate in samples per second.
//!
//! Run: `cargo run --release --example format_speed -- [--log2 22]`.

use anyhow::{Context, Result, anyhow};
use flate2::Compression;
use flate2::write::GzEncoder;
use std::hint::black_box;
use std::io::Write;
use std::time::Instant;
use trapwise::ingest::{self, Format, IngestOptions};
use trapwise::recording::{AxisTrace, PositionUnit, Recording};
use trapwise::simulate::{Disturbances, OuAxis, simulate_axes};

/// Sampling rate of the record, Hz.
const SAMPLE_RATE_HZ: f64 = 50_000.0;

/// Median of the wall times (s) of `reps` calls of `f`.
fn median_time<T>(reps: usize, mut f: impl FnMut() -> Result<T>) -> Result<f64> {
    let mut times = Vec::with_capacity(reps);
    for _ in 0..reps {
        let start = Instant::now();
        black_box(f()?);
        times.push(start.elapsed().as_secs_f64());
    }
    times.sort_by(f64::total_cmp);
    times
        .get(times.len() / 2)
        .copied()
        .ok_or_else(|| anyhow!("no repetitions"))
}

/// gzip of `bytes` at the default level.
fn gzip(bytes: &[u8]) -> Result<Vec<u8>> {
    let mut encoder = GzEncoder::new(Vec::new(), Compression::default());
    encoder.write_all(bytes)?;
    Ok(encoder.finish()?)
}

/// An `.npz` of one deflated member holding `npy`.
fn deflated_npz(npy: &[u8]) -> Result<Vec<u8>> {
    let mut writer = zip::ZipWriter::new(std::io::Cursor::new(Vec::new()));
    let deflated = zip::write::SimpleFileOptions::default()
        .compression_method(zip::CompressionMethod::Deflated)
        .large_file(true);
    writer.start_file("recording.npy", deflated)?;
    writer.write_all(npy)?;
    Ok(writer.finish()?.into_inner())
}

fn main() -> Result<()> {
    let args: Vec<String> = std::env::args().collect();
    let log2 = match args.iter().position(|a| a == "--log2") {
        Some(idx) => args
            .get(idx + 1)
            .context("--log2 needs a value")?
            .parse::<u32>()?,
        None => 22,
    };
    let n_samples = 1usize << log2;
    let axes: Vec<OuAxis> = ["x", "y"]
        .iter()
        .map(|n| OuAxis {
            name: (*n).to_string(),
            corner_frequency_hz: 948.676,
            variance: 82.328,
        })
        .collect();
    let samples = simulate_axes(
        &axes,
        SAMPLE_RATE_HZ,
        n_samples,
        7,
        &Disturbances::default(),
    );
    let record = Recording {
        sample_rate_hz: SAMPLE_RATE_HZ,
        unit: PositionUnit::Nanometre,
        axes: axes
            .iter()
            .zip(samples)
            .map(|(a, s)| AxisTrace {
                name: a.name.clone(),
                samples: s,
            })
            .collect(),
    };
    let npy = ingest::encode(&record, Format::Npy, None)?;
    let csv = ingest::encode(&record, Format::Csv, None)?;
    // The same CSV as a spreadsheet in a European locale writes it.
    let semicolon: Vec<u8> = csv
        .iter()
        .map(|&b| match b {
            b',' => b';',
            b'.' => b',',
            other => other,
        })
        .collect();
    let cases: Vec<(&str, Vec<u8>)> = vec![
        ("record.npy", npy.clone()),
        ("record.npz", ingest::encode(&record, Format::Npz, None)?),
        ("deflated.npz", deflated_npz(&npy)?),
        ("record.npy.gz", gzip(&npy)?),
        ("record.csv", csv.clone()),
        ("record.csv.gz", gzip(&csv)?),
        ("semicolon.csv", semicolon),
    ];
    let options = IngestOptions {
        sample_rate_hz: Some(SAMPLE_RATE_HZ),
        unit: Some(PositionUnit::Nanometre),
        ..IngestOptions::default()
    };
    for (name, bytes) in &cases {
        let read = ingest::parse(name, bytes, &options)?;
        if read.axes != record.axes {
            return Err(anyhow!("{name}: samples differ from the record"));
        }
        let seconds = median_time(5, || Ok(ingest::parse(name, bytes, &options)?))?;
        println!(
            "{{\"file\": \"{name}\", \"log2_samples\": {log2}, \"axes\": 2, \"bytes\": {}, \
             \"median_s\": {seconds:.4}, \"msamples_per_s\": {:.1}}}",
            bytes.len(),
            (2 * n_samples) as f64 / seconds / 1e6
        );
    }
    Ok(())
}
