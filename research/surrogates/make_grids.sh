#!/bin/sh
# Held-out and training grids of the surrogate research (data/ is not committed; rerun to resume).
# Seeds: training Sobol 20260101 (demo, = grids/demo-train.toml), 20260102 (sound-speed), 20260103 (spectral);
# held-out latin hypercubes 20260313 / 20260315 / 20260317; near-face sets 20260314 / 20260316 / 20260318.
set -e
cd "$(dirname "$0")"
PY=../../.venv/bin/python
TF=../../.venv/bin/tovforge
run() { [ -f "data/$2.h5" ] || nice -n 10 $TF grid run "specs/$1.toml" --out "data/$2.h5"; }
faces() { [ -f "data/$2.h5" ] || nice -n 10 $PY faces.py "specs/$1.toml" --points ${4:-240} --seed "$3" --out "data/$2.h5"; }
for what in "$@"; do
  case $what in
    holdouts)
      run demo-holdout demo-holdout; faces demo-holdout demo-faces 20260314
      run ss-holdout ss-holdout; faces ss-holdout ss-faces 20260316 300
      run spectral-holdout spectral-holdout; faces spectral-holdout spectral-faces 20260318 270 ;;
    demo32k) run demo-train-32k demo-train-32k ;;
    ss16k) run ss-train-16k ss-train-16k ;;
    spectral16k) run spectral-train-16k spectral-train-16k ;;
  esac
done
