#!/usr/bin/env bash
# Regenerates the demo recordings of the Saltmarsh Institute scenario (see README.md here) with
# `trapwise simulate`. Deterministic: the same seeds give the same bytes.
set -euo pipefail
cd "$(dirname "$0")"
tw=(cargo run --quiet --release --)
# Every bead here is in water, so every recording has the frequency-dependent drag
# (--hydrodynamics: random-phase synthesis of the whole aliased spectrum).
# Instrument "osprey", trap A: high-speed camera tracking in nanometres, two lateral axes.
"${tw[@]}" simulate -o osprey-trapA-camera.csv --axes x,y --stiffness 0.040,0.034 \
  --bead-diameter 1.0 --temperature 24 --sample-rate 20000 --duration 1.5 --seed 11 --hydrodynamics
# Instrument "osprey", trap B: quadrant photodiode in volts, three axes, 480 nm/V.
"${tw[@]}" simulate -o osprey-trapB-qpd.npy --units V --sensitivity 480 --axes x,y,z \
  --stiffness 0.080,0.075,0.018 --bead-diameter 1.0 --temperature 24 --sample-rate 50000 \
  --duration 1 --seed 12 --hydrodynamics
# Instrument "kittiwake", trap 1: photodiode with mains pickup and slow drift, raw f32 volts.
"${tw[@]}" simulate -o kittiwake-trap1-pickup.f32 --units V --sensitivity 620 --stiffness 0.060 \
  --bead-diameter 2.0 --temperature 22 --sample-rate 50000 --duration 1 --seed 13 \
  --hum-amplitude 3 --hum-frequency 50 --drift 20 --hydrodynamics
# Instrument "kittiwake", trap 1, fast: the photodiode's parasitic filter (f3dB 7 kHz, alpha 0.3)
# and the frequency-dependent drag on the 2 um bead, at 100 kHz for 2 s, raw f32 volts.
"${tw[@]}" simulate -o kittiwake-trap1-fast.f32 --units V --sensitivity 620 --axes x,y \
  --stiffness 0.15,0.12 --bead-diameter 2.0 --temperature 22 --sample-rate 100000 --duration 2 \
  --seed 14 --detector-filter 7000:0.3 --hydrodynamics
# Instrument "kittiwake", trap 2: a photodiode in volts (540 nm/V) with the sample stage driven at
# 32.3 Hz, 200 nm, for active calibration, the 1 um bead's centre 2 um above the coverslip (drag
# 1.16 times the bulk value by Faxen's law). The simulator has no frequency-dependent form of the
# drag near a wall, so this file has none (calibrate it with --hydrodynamics off).
"${tw[@]}" simulate -o kittiwake-trap2-driven.f32 --units V --sensitivity 540 --stiffness 0.070 \
  --bead-diameter 1.0 --temperature 22 --height 2.0 --sample-rate 50000 --duration 4 --seed 15 \
  --drive-frequency 32.3 --drive-amplitude 200
