//! The plain-text summary printed by `calibrate` and `upload`.

use super::{CalibrationReport, ValueSe};
use std::fmt::Write;

/// Formats `value +- se` with as many decimals as the error warrants (two significant digits
/// of the error; common practice for reporting measurements).
pub(crate) fn pm(v: &ValueSe) -> String {
    if !(v.se.is_finite() && v.se > 0.0) {
        return format!("{:.4}", v.value);
    }
    let digits = (1.0 - v.se.log10().floor()).clamp(0.0, 12.0) as usize;
    format!("{:.*} ± {:.*}", digits, v.value, digits, v.se)
}

/// `pm` of a value that may be missing (a failed method), or a dash.
fn pm_or_dash(v: Option<&ValueSe>) -> String {
    v.map(pm).unwrap_or_else(|| "failed".into())
}

/// A readable multi-line summary of a report: inputs, one row per axis, the verdicts and the
/// findings.
pub fn summary_table(r: &CalibrationReport) -> String {
    let mut s = String::new();
    let i = &r.input;
    let c = &r.conditions;
    let _ = writeln!(
        s,
        "{} ({}, sha256 {}…): {} axis(es) × {} samples at {} Hz ({:.2} s), in {}",
        i.file_name,
        i.format,
        i.sha256.get(..12).unwrap_or(&i.sha256),
        i.axes.len(),
        i.n_samples,
        i.sample_rate_hz,
        i.duration_s,
        i.unit
    );
    let height = c
        .height_um
        .map(|h| format!(", centre {h:.2} µm above the surface"))
        .unwrap_or_default();
    let _ = writeln!(
        s,
        "bead {:.3} µm at {:.1} °C, viscosity {:.4} mPa·s ({}){}, kB·T {:.4} pN·nm, bulk drag {:.4e} pN·s/nm",
        c.bead_diameter_um,
        c.temperature_c,
        c.viscosity_mpa_s,
        c.viscosity_source,
        height,
        r.thermal_energy_pn_nm,
        r.drag_pn_s_per_nm.value
    );
    if let Some(p) = &r.principal_axes {
        let _ = writeln!(
            s,
            "axes {} and {} calibrated along the trap's principal axes {} and {}, turned {} degrees from {} towards {}",
            p.detector_axes[0],
            p.detector_axes[1],
            p.rotated_axes[0],
            p.rotated_axes[1],
            pm(&p.angle_deg),
            p.detector_axes[0],
            p.detector_axes[1]
        );
    }
    let _ = writeln!(s);
    let header = [
        "axis",
        "fc (Hz)",
        "tau (ms)",
        "kappa psd (pN/nm)",
        "kappa acf (pN/nm)",
        "kappa equip. (pN/nm)",
        "consensus (pN/nm)",
        "beta (nm/V)",
        "verdict",
    ];
    let mut rows: Vec<[String; 9]> = Vec::new();
    for a in &r.axes {
        let k = &a.stiffness_pn_per_nm;
        let tau_ms = a.relaxation_time_s.map(|t| ValueSe {
            value: t.value * 1e3,
            se: t.se * 1e3,
        });
        let eq = if k.equipartition_independent {
            pm_or_dash(k.equipartition.as_ref())
        } else {
            format!("{} *", pm_or_dash(k.equipartition.as_ref()))
        };
        rows.push([
            a.axis.clone(),
            pm_or_dash(a.corner_frequency_hz.as_ref()),
            pm_or_dash(tau_ms.as_ref()),
            pm_or_dash(k.psd.as_ref()),
            pm_or_dash(k.acf.as_ref()),
            eq,
            pm(&k.consensus),
            a.sensitivity_nm_per_v
                .as_ref()
                .map(pm)
                .unwrap_or_else(|| "-".into()),
            a.verdict.clone(),
        ]);
    }
    let mut widths = header.map(|h| h.chars().count());
    for row in &rows {
        for (w, cell) in widths.iter_mut().zip(row) {
            *w = (*w).max(cell.chars().count());
        }
    }
    let line = |cells: &[String]| {
        cells
            .iter()
            .zip(&widths)
            .map(|(c, w)| format!("{c:<w$}", w = *w))
            .collect::<Vec<_>>()
            .join("  ")
            .trim_end()
            .to_string()
    };
    let _ = writeln!(s, "{}", line(&header.map(String::from)));
    for row in &rows {
        let _ = writeln!(s, "{}", line(row));
    }
    if r.axes
        .iter()
        .any(|a| !a.stiffness_pn_per_nm.equipartition_independent)
    {
        let _ = writeln!(
            s,
            "* uses beta from the spectral fit, so it is not an independent check and stays out of the consensus"
        );
    }
    if r.axes.iter().any(|a| !a.errors_include_conditions) {
        let _ = writeln!(
            s,
            "errors are statistical only: give --bead-diameter-se, --temperature-se, --viscosity-se or --height-se to include the run conditions"
        );
    }
    for a in &r.axes {
        if let Some(n) = a.noise_floor.as_ref().filter(|n| n.included)
            && let (Some(level), Some(share)) = (&n.level, n.variance_share)
        {
            let _ = writeln!(
                s,
                "{}: white noise floor {:.3e} ± {:.1e} {} ({:.2} % of the variance), subtracted from equipartition",
                a.axis,
                level.value,
                level.se,
                n.level_unit,
                100.0 * share
            );
        }
        if let Some(act) = &a.active {
            let scale = match (&act.sensitivity_nm_per_v, &act.scale_factor) {
                (Some(beta), _) => format!("beta {} nm/V", pm(beta)),
                (None, Some(f)) => format!("scale factor {}", pm(f)),
                _ => String::new(),
            };
            let _ = writeln!(
                s,
                "{}: stage drive {} Hz, {} nm: {scale}, drag {} pN·s/nm measured ({} times the assumed), used by every method; kappa {} pN/nm",
                a.axis,
                act.drive_frequency_hz,
                act.drive_amplitude_nm,
                pm(&act.drag_pn_s_per_nm),
                pm(&act.drag_ratio),
                pm(&act.stiffness_pn_per_nm),
            );
        }
        for reason in &a.verdict_reasons {
            let _ = writeln!(s, "{}: {}", a.axis, reason);
        }
    }
    let findings: Vec<_> = r.axes.iter().flat_map(|a| a.findings.iter()).collect();
    if findings.is_empty() {
        let _ = writeln!(s, "\nno data-quality findings");
    } else {
        let _ = writeln!(s, "\nfindings:");
        for f in findings {
            let _ = writeln!(s, "  [{}] {}: {}", f.severity, f.code, f.message);
        }
    }
    s
}
