#!/usr/bin/env python3
"""Turns the JSON written by bench/run.sh into one markdown summary (stdout): medians, ratios,
and each figure next to its target from the benchmark issue. Standard library only."""

import json
import os
import sys


def lines(path):
    if not os.path.exists(path):
        return []
    with open(path) as fh:
        return [json.loads(line) for line in fh if line.strip()]


def main():
    res = sys.argv[1]
    machine = json.load(open(os.path.join(res, "machine.json")))
    out = []
    w = out.append
    w("# trapwise benchmark results\n")
    w(
        f"Machine: {machine['cpu']}, nproc {machine['nproc']}, kernel {machine['kernel']}; "
        f"{machine['rustc']}; numpy {machine['numpy']}, scipy {machine['scipy']}; "
        f"load average (1, 5, 15 min) at start {' '.join(machine['load_at_start'])}, "
        f"at end {' '.join(machine.get('load_at_end', ['?']))}.\n"
    )

    speed = lines(os.path.join(res, "speed.jsonl"))
    if speed:
        w("## In-process speed against the FFT floor (medians)\n")
        w("Target: calibration of one axis costs no more than about five FFTs of the same length; CSV parsing at least 200 MB/s.\n")
        w("| axes | N | calibrate (ms) | per axis / FFT (planned) | per axis / FFT (with plan) | FFT planned (ms) | FFT with plan (ms) | pipeline f32 (ms) | pipeline CSV (ms) | CSV MB/s | npy MB/s | f32 MB/s | SHA-256 MB/s |")
        w("|---|---|---|---|---|---|---|---|---|---|---|---|---|")
        for d in speed:
            p = d["parse"]
            w(
                f"| {d['axes']} | 2^{d['log2_n']} | {d['calibrate_median_s']*1e3:.1f} | "
                f"{d['ratio_calibrate_per_axis_to_fft_planned']:.1f} | {d['ratio_calibrate_per_axis_to_fft_with_plan']:.2f} | "
                f"{d['fft_planned_median_s']*1e3:.2f} | {d['fft_with_plan_median_s']*1e3:.2f} | "
                f"{d['pipeline_f32_median_s']*1e3:.1f} | {d.get('pipeline_csv_median_s', float('nan'))*1e3:.1f} | "
                f"{p['csv']['mb_per_s']:.0f} | {p['npy']['mb_per_s']:.0f} | {p['raw-f32']['mb_per_s']:.0f} | "
                f"{d.get('sha256_csv_mb_per_s', float('nan')):.0f} |"
            )
        w("")

    e2e = lines(os.path.join(res, "end_to_end.jsonl"))
    if e2e:
        w("## End to end on files: `trapwise calibrate` against the reference script (hyperfine medians)\n")
        w("Targets: at least 20 times faster than the reference on the same CSV file; peak memory at most three times the samples as f64.\n")
        w("| N | format | file MB | trapwise (s) | reference (s) | reference / trapwise | reference fits alone (s) | trapwise peak RSS (MB) | RSS / samples f64 | fc error trapwise | fc error reference | kappa error trapwise (consensus) | kappa error reference (psd, acf, eq) |")
        w("|---|---|---|---|---|---|---|---|---|---|---|---|---|")
        for d in e2e:
            ref = d.get("reference_axis")
            ref_s = f"{d['reference_median_s']:.3f}" if ref else "not run"
            ratio = f"{d['ratio_reference_to_trapwise']:.1f}" if ref else "-"
            fits = f"{sum(ref['stage_times_s'].values()):.3f}" if ref else "-"
            ref_fc = f"{ref['fc_rel_error']*100:+.1f} %" if ref else "-"
            ref_k = (
                f"{ref['kappa_psd_rel_error']*100:+.1f} / {ref['kappa_acf_rel_error']*100:+.1f} / {ref['kappa_eq_rel_error']*100:+.1f} %"
                if ref
                else "-"
            )
            w(
                f"| 2^{d['log2_n']} | {d['format']} | {d['file_bytes']/1e6:.1f} | {d['trapwise_median_s']:.3f} | {ref_s} | {ratio} | {fits} | "
                f"{d['trapwise_peak_rss_kib']/1024:.0f} | {d['peak_rss_over_samples_f64']:.2f} | "
                f"{d['trapwise_fc_rel_error']*100:+.2f} % (se {d['trapwise_fc_se_rel']*100:.2f} %) | {ref_fc} | "
                f"{d['trapwise_kappa_rel_error']['consensus']*100:+.2f} % | {ref_k} |"
            )
        w("")
        w("Reference times are whole processes (interpreter start and the numpy/scipy imports, about 1.3 s here, included); 'fits alone' is the reference's Welch fit, autocorrelation fit and variance of its last in-script run, without loading the file.\n")

    eff = lines(os.path.join(res, "efficiency.jsonl"))
    ref_eff = lines(os.path.join(res, "reference_efficiency.jsonl"))
    if eff:
        w("## Statistical efficiency against the Cramer-Rao bound\n")
        w("Targets: fc spread within 10 % of the bound where fc is well below Nyquist; bias below a fifth of a standard error; one-se interval coverage 64-72 %.\n")
        w("| setting | seeds | estimate | bias / sd | spread / CRB (fit band) | spread / CRB (whole band) | coverage of +-1 se | robust sd / sd |")
        w("|---|---|---|---|---|---|---|---|")
        for d in eff:
            for key in ("fc", "kappa_psd", "kappa_acf", "kappa_equipartition", "kappa_consensus"):
                v = d[key]
                fit = v.get("sd_over_crb_fit_band")
                whole = v.get("sd_over_crb_whole_band", v.get("sd_over_crb_known_drag"))
                w(
                    f"| {d['setting']} | {d['seeds']} | {key} | {v['bias_in_sd']:+.3f} | "
                    f"{fit:.3f} | " if fit is not None else f"| {d['setting']} | {d['seeds']} | {key} | {v['bias_in_sd']:+.3f} | - | "
                )
                out[-1] += (f"{whole:.3f} | " if whole is not None else "- | ") + f"{v['coverage_1se']*100:.1f} % | {v['sd_robust']/v['sd']:.2f} |"
            w(f"| {d['setting']} | | (records with a false narrow peak: {d['records_with_false_peaks']}) | | | | | |")
        w("")
        w("The stiffness bounds of acf, equipartition and consensus take drag and temperature as known (D fixed, whole band); psd's is the fc bound over the fit band.\n")
    if eff and ref_eff:
        w("### Reference script over the same settings (its own exact AR(1) draws)\n")
        w("| setting | seeds | fc bias | bias / sd | spread / CRB (fit band) | robust spread / CRB | coverage of +-1 se |")
        w("|---|---|---|---|---|---|---|")
        for d, r in zip(eff, ref_eff):
            crb = d["fc"]["crb_sd_fit_band"]
            w(
                f"| {d['setting']} | {r['seeds']} | {r['fc_bias_rel']*100:+.1f} % | {r['fc_bias_in_sd']:+.2f} | "
                f"{r['fc_sd_hz']/crb:.2f} | {r['fc_sd_robust_hz']/crb:.2f} | {r['fc_coverage_1se']*100:.1f} % |"
            )
        w("")

    thr = lines(os.path.join(res, "throughput.jsonl"))
    if thr:
        w("## Service throughput on loopback (2^20-sample raw f32 uploads)\n")
        w("| concurrency | uploads | statuses | calibrations/s | median latency (s) | p99 latency (s) | service peak RSS so far (MB) |")
        w("|---|---|---|---|---|---|---|")
        for d in thr:
            rss = d["service_peak_rss_mib"]
            w(
                f"| {d['concurrency']} | {d['uploads_sent']} | {d['statuses']} | {d['calibrations_per_s']:.2f} | "
                f"{d['latency_median_s']:.3f} | {d['latency_p99_s']:.3f} | {rss:.0f} |"
                if d["latency_median_s"] is not None
                else f"| {d['concurrency']} | {d['uploads_sent']} | {d['statuses']} | - | - | - | - |"
            )
        w("")
    print("\n".join(out))


if __name__ == "__main__":
    main()
