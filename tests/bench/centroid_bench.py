#!/usr/bin/env python3
"""Centroid benchmark: glowcheck's peak finder (through `glowsim peaks --json`) against the Cramér–Rao
lower bound and against the scipy recipe a user would otherwise reach for, on the same synthetic traces.

Not a timed test: it measures accuracy ratios and rates, never speed.

    cargo build --release -p glowcheck-sim
    .venv/bin/python tests/bench/centroid_bench.py [--glowsim target/release/glowsim] [--quick]

Traces come from `glowsim synth --test-line ...`: isolated pixel-integrated Gaussian lines (FWHM in px),
Poisson shot noise, Gaussian read noise, dark current, a bias, ADC quantisation. Every trace is seeded,
so a run is reproducible.

Cramér–Rao bound (CRLB). Model of the mean counts of pixel k (pixel edges k ± ½):
    μ_k = B + (A/g)·[Φ((k+½−x₀)/σ) − Φ((k−½−x₀)/σ)],
unknowns θ = (x₀, A, σ, B) — position, area, width and a flat background, all four unknown to the
estimator. Noise variance per pixel in counts: v_k = (μ_k − bias)/g + (σ_read/g)² + 1/12 (Poisson in
electrons, Gaussian read noise, uniform quantisation). Fisher information in the Gaussian approximation
of Poisson + read noise (the standard method): F_ij = Σ_k ∂_iμ_k ∂_jμ_k / v_k, summed over pixels within
±4 FWHM (at least ±6 px) of the line; CRLB(x₀) = sqrt((F⁻¹)₀₀). No package computes this; the check
that it is right is the third column: a weighted least-squares fit of that same pixel-integrated model
(scipy curve_fit, given the true noise variance) should reach ratio ≈ 1.

scipy recipe ("scipy" column): `signal.find_peaks` on the raw counts with height ≥ median + 5 σ_noise and
prominence ≥ 3 σ_noise (the thresholds glowcheck uses by default; σ_noise from the median absolute
deviation of first differences), then `optimize.curve_fit` of a
Gaussian plus constant sampled at pixel centres over ±1.5 FWHM (from `peak_widths`) around each peak.
"""
import argparse
import json
import math
import os
import subprocess
import sys
import tempfile
import warnings

import numpy as np
from scipy import optimize, signal, special

warnings.simplefilter("ignore", optimize.OptimizeWarning)

FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))
BIAS = 100.0
READ_NOISE_E = 5.0
DARK_E_PER_S = 50.0
INTEGRATION_MS = 100.0
DARK_E = DARK_E_PER_S * INTEGRATION_MS * 1e-3
PIXELS = 2048
LINES_PER_TRACE = 16
SPACING_PX = 120.0


def read_glowtrace(path):
    """Minimal reader of glowtrace v1 (spec: host-sim/src/trace/mod.rs)."""
    header, frames, cur = {}, [], None
    with open(path) as f:
        for raw in f:
            line = raw.strip()
            if not line or line.startswith("#"):
                continue
            if line.startswith("glowtrace"):
                assert line == "glowtrace 1", line
            elif line.startswith("frame "):
                cur = (line.split()[1], [])
                frames.append(cur)
            elif line == "end":
                break
            elif cur is None:
                k, v = line.split(":", 1)
                header.setdefault(k.strip(), []).append(v.strip())
            else:
                cur[1].extend(int(w) for w in line.split())
    return header, [(k, np.array(c, dtype=float)) for k, c in frames]


def truth_lines(header):
    out = []
    for v in header.get("synth.line", []):
        d = dict(w.split("=", 1) for w in v.split()[1:])
        out.append((float(d["px"]), float(d["area_e"]), float(d["peak_e"])))
    return out


def pixel_model(k, x0, area, sigma, b):
    lo = (k - 0.5 - x0) / sigma
    hi = (k + 0.5 - x0) / sigma
    return b + area * 0.5 * (special.erf(hi / math.sqrt(2)) - special.erf(lo / math.sqrt(2)))


def crlb_px(x0, area_e, fwhm, gain):
    """sqrt((F⁻¹)₀₀) for θ = (x₀, A, σ, B) in the noise model of the module docs."""
    sigma = fwhm / FWHM_PER_SIGMA
    reach = max(6.0, 4.0 * fwhm)
    k = np.arange(math.floor(x0 - reach), math.ceil(x0 + reach) + 1, dtype=float)
    a = area_e / gain
    u_lo = (k - 0.5 - x0) / sigma
    u_hi = (k + 0.5 - x0) / sigma
    phi = lambda u: np.exp(-0.5 * u * u) / math.sqrt(2 * math.pi)
    frac = 0.5 * (special.erf(u_hi / math.sqrt(2)) - special.erf(u_lo / math.sqrt(2)))
    d_x0 = -(a / sigma) * (phi(u_hi) - phi(u_lo))
    d_a = frac
    d_s = -(a / sigma) * (u_hi * phi(u_hi) - u_lo * phi(u_lo))
    d_b = np.ones_like(k)
    signal_counts = a * frac + DARK_E / gain
    var = signal_counts / gain + (READ_NOISE_E / gain) ** 2 + 1.0 / 12.0
    jac = np.vstack([d_x0, d_a, d_s, d_b])
    fisher = (jac / var) @ jac.T
    return math.sqrt(np.linalg.inv(fisher)[0, 0])


def noise_sigma(y):
    d = np.diff(y)
    return 1.4826 * np.median(np.abs(d - np.median(d))) / math.sqrt(2.0)


def scipy_peaks(y):
    """The PC recipe: find_peaks + curve_fit of a sampled Gaussian + constant."""
    s = noise_sigma(y)
    idx, _ = signal.find_peaks(y, height=float(np.median(y)) + 5.0 * s, prominence=3.0 * s)
    if len(idx) == 0:
        return []
    widths = signal.peak_widths(y, idx, rel_height=0.5)[0]
    out = []
    for p, w in zip(idx, widths):
        half = max(3, int(round(1.5 * max(w, 1.0))))
        lo, hi = max(0, p - half), min(len(y), p + half + 1)
        x = np.arange(lo, hi, dtype=float)
        seg = y[lo:hi]
        base = float(np.min(seg))
        g = lambda x, a, c, sg, b: b + a * np.exp(-0.5 * ((x - c) / sg) ** 2)
        p0 = [float(y[p]) - base, float(p), max(w, 1.0) / FWHM_PER_SIGMA, base]
        try:
            popt, _ = optimize.curve_fit(g, x, seg, p0=p0, maxfev=2000)
            out.append(float(popt[1]))
        except (RuntimeError, ValueError):
            out.append(float(p))
    return out


def ideal_wls(y, x0_guess, fwhm, gain):
    """Weighted LS of the true pixel-integrated model with the true variance: checks the CRLB."""
    reach = max(6.0, 4.0 * fwhm)
    lo = max(0, int(math.floor(x0_guess - reach)))
    hi = min(len(y), int(math.ceil(x0_guess + reach)) + 1)
    k = np.arange(lo, hi, dtype=float)
    seg = y[lo:hi]
    var = np.maximum(seg - BIAS, 0.0) / gain + (READ_NOISE_E / gain) ** 2 + 1.0 / 12.0
    sigma0 = fwhm / FWHM_PER_SIGMA
    base = float(np.median(seg[[0, 1, -2, -1]]))
    area0 = max(float(np.sum(seg - base)), 1.0)
    try:
        popt, _ = optimize.curve_fit(
            pixel_model, k, seg, p0=[x0_guess, area0, sigma0, base], sigma=np.sqrt(var), maxfev=4000
        )
        return float(popt[0])
    except (RuntimeError, ValueError):
        return float("nan")


def match(found, truth_px, tol):
    """Nearest found centre within tol of each true line (None when missed)."""
    found = np.asarray(sorted(found))
    out = []
    for t in truth_px:
        if len(found) == 0:
            out.append(None)
            continue
        j = int(np.argmin(np.abs(found - t)))
        out.append(float(found[j]) if abs(found[j] - t) <= tol else None)
    return out


def run(cmd):
    r = subprocess.run(cmd, capture_output=True, text=True)
    if r.returncode != 0:
        sys.exit(f"command failed: {' '.join(cmd)}\n{r.stderr}")
    return r.stdout


def gain_for(peak_e):
    # Keep the strongest pixel below ~40 000 counts of a 16-bit ADC; gain ≥ 1 e/count.
    return max(1.0, peak_e / 40_000.0)


def peak_for_snr(snr):
    b = DARK_E + READ_NOISE_E**2
    s2 = snr * snr
    return 0.5 * (s2 + math.sqrt(s2 * s2 + 4.0 * s2 * b))


def synth(glowsim, path, seed, fwhm, snr, positions, gain):
    cmd = [glowsim, "synth", "--seed", str(seed), "--pixels", str(PIXELS), "--out", path,
           "--fwhm-px", str(fwhm), "--snr", str(snr), "--adc-bits", "16", "--gain-e", repr(gain),
           "--bias", str(BIAS), "--read-noise-e", str(READ_NOISE_E), "--dark-e-per-s", str(DARK_E_PER_S),
           "--integration-ms", str(INTEGRATION_MS)]
    for p in positions:
        cmd += ["--test-line", repr(float(p))]
    run(cmd)


def glow_peaks(glowsim, path):
    return json.loads(run([glowsim, "peaks", path, "--json"]))


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--glowsim", default=os.path.join("target", "release", "glowsim"))
    ap.add_argument("--traces", type=int, default=20, help="traces per cell (16 lines each)")
    ap.add_argument("--noise-frames", type=int, default=100)
    ap.add_argument("--quick", action="store_true", help="fewer traces, for a smoke run")
    args = ap.parse_args()
    if args.quick:
        args.traces, args.noise_frames = 3, 10
    rng = np.random.default_rng(20240601)
    tmp = tempfile.mkdtemp(prefix="glowbench-")
    path = os.path.join(tmp, "t.trace")
    seed = 1000

    print("## Centroid RMS error / CRLB (isolated lines, 16 per trace, "
          f"{args.traces} traces per cell)\n")
    print("| FWHM px | peak SNR | lines | CRLB px | glowcheck found | glowcheck RMS/CRLB | "
          "glowcheck mean σ/CRLB | scipy found | scipy RMS/CRLB | ideal WLS RMS/CRLB |")
    print("|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
    for fwhm in (2.0, 2.5, 3.0, 4.0, 6.0, 8.0):
        for snr in (10.0, 30.0, 100.0, 300.0, 1000.0):
            peak_e = peak_for_snr(snr)
            sigma = fwhm / FWHM_PER_SIGMA
            density = 1.0 / (sigma * math.sqrt(2 * math.pi))
            area_e = peak_e / density
            gain = gain_for(peak_e)
            err_g, err_s, err_w, sig_g, crlbs = [], [], [], [], []
            n_lines = found_g = found_s = 0
            for _ in range(args.traces):
                seed += 1
                start = 60.0 + rng.uniform(0, 1)
                pos = start + SPACING_PX * np.arange(LINES_PER_TRACE) + rng.uniform(0, 1, LINES_PER_TRACE)
                synth(args.glowsim, path, seed, fwhm, snr, pos, gain)
                header, frames = read_glowtrace(path)
                truth = truth_lines(header)
                y = frames[0][1]
                g = glow_peaks(args.glowsim, path)
                tol = max(1.0, 0.5 * fwhm)
                mg = match([p["center_px"] for p in g["peaks"]], [t[0] for t in truth], tol)
                sigmas = {round(p["center_px"], 6): p["center_sigma_px"] for p in g["peaks"]}
                ms = match(scipy_peaks(y), [t[0] for t in truth], tol)
                for (tx, _, _), a, b in zip(truth, mg, ms):
                    n_lines += 1
                    c = crlb_px(tx, area_e, fwhm, gain)
                    crlbs.append(c)
                    if a is not None:
                        found_g += 1
                        err_g.append((a - tx) / c)
                        sig_g.append(sigmas.get(round(a, 6), float("nan")) / c)
                    if b is not None:
                        found_s += 1
                        err_s.append((b - tx) / c)
                    w = ideal_wls(y, tx, fwhm, gain)
                    if math.isfinite(w):
                        err_w.append((w - tx) / c)
            rms = lambda e: math.sqrt(np.mean(np.square(e))) if e else float("nan")
            print(f"| {fwhm:g} | {snr:g} | {n_lines} | {np.mean(crlbs):.4f} | "
                  f"{100 * found_g / n_lines:.1f} % | {rms(err_g):.3f} | {np.nanmean(sig_g) if sig_g else float('nan'):.3f} | "
                  f"{100 * found_s / n_lines:.1f} % | {rms(err_s):.3f} | {rms(err_w):.3f} |", flush=True)

    print("\n## Detection rate vs peak SNR (FWHM 3 px)\n")
    print("| peak SNR | lines | glowcheck found | scipy found |")
    print("|---:|---:|---:|---:|")
    for snr in (3.0, 5.0, 8.0, 10.0, 15.0, 30.0):
        n = fg = fs = 0
        for _ in range(args.traces):
            seed += 1
            pos = 60.0 + SPACING_PX * np.arange(LINES_PER_TRACE) + rng.uniform(0, 1, LINES_PER_TRACE)
            synth(args.glowsim, path, seed, 3.0, snr, pos, 1.0)
            header, frames = read_glowtrace(path)
            truth = [t[0] for t in truth_lines(header)]
            g = glow_peaks(args.glowsim, path)
            mg = match([p["center_px"] for p in g["peaks"]], truth, 1.5)
            ms = match(scipy_peaks(frames[0][1]), truth, 1.5)
            n += len(truth)
            fg += sum(m is not None for m in mg)
            fs += sum(m is not None for m in ms)
        print(f"| {snr:g} | {n} | {100 * fg / n:.1f} % | {100 * fs / n:.1f} % |", flush=True)

    print(f"\n## False peaks per noise-only {PIXELS}-px frame ({args.noise_frames} frames)\n")
    fg = fs = 0
    for _ in range(args.noise_frames):
        seed += 1
        run([args.glowsim, "synth", "--no-lines", "--seed", str(seed), "--pixels", str(PIXELS), "--out", path,
             "--adc-bits", "16", "--gain-e", "1", "--bias", str(BIAS), "--read-noise-e", str(READ_NOISE_E),
             "--dark-e-per-s", str(DARK_E_PER_S), "--integration-ms", str(INTEGRATION_MS)])
        fg += len(glow_peaks(args.glowsim, path)["peaks"])
        fs += len(scipy_peaks(read_glowtrace(path)[1][0][1]))
    print("| finder | false peaks per frame |")
    print("|---|---:|")
    print(f"| glowcheck | {fg / args.noise_frames:.3f} |")
    print(f"| scipy find_peaks (height ≥ median + 5 σ, prominence ≥ 3 σ) | {fs / args.noise_frames:.3f} |")


if __name__ == "__main__":
    main()
