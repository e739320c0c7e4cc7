#!/usr/bin/env bash
# Remakes docs/img/tour-trot-rear-load.png, the README's picture: the side-by-side review video of
# trot-rear-load (force-qp left, force-qp-l1 right) made by `bench render --compare`, frame at 6.0 s,
# reduced to a 256-colour PNG (under 150 KB). Needs an OpenGL back end (MUJOCO_GL=egl on a headless machine).
set -euo pipefail
cd "$(dirname "$0")/.."
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
export MUJOCO_GL=${MUJOCO_GL:-egl}
s=scenarios/payload/trot-rear-load.yaml
bench run "$s" --controller force-qp --out "$work/res-qp" --no-plots --no-history || true   # fails by design
bench run "$s" --controller force-qp-l1 --out "$work/res-l1" --no-plots --no-history
bench render --compare "$work/res-qp/trot-rear-load" "$work/res-l1/trot-rear-load" --out "$work/videos"
python - "$work/videos/trot-rear-load.force-qp-vs-force-qp-l1.mp4" docs/img/tour-trot-rear-load.png <<'PY'
import sys
import imageio
from PIL import Image
reader = imageio.get_reader(sys.argv[1])
frame = reader.get_data(int(6.0 * reader.get_meta_data()["fps"]))
Image.fromarray(frame).quantize(colors=256, method=Image.Quantize.MEDIANCUT, dither=Image.Dither.NONE) \
    .save(sys.argv[2], optimize=True)
PY
ls -l docs/img/tour-trot-rear-load.png
