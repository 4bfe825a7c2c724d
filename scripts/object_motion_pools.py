"""Inside the planted object-motion cell (cell 2) under global jitter (docs/performance.md,
session 16): on the differential-motion protocol's global trials, the weighted sums that unit 3
takes of its subunits (first-layer pathways 0 and 1, after their Relu) over the centre disc and
over the surrounding ring, at the readout position (10, 10); their difference's mean and s.d.
over frames, the mean of its rectified part, and how often it is positive. A balanced cell has
a difference near zero at every frame; the planted cell is balanced at some grating periods
only.

    sufficit stimulus differential-motion period_um=225 --model PLANTED --out STIM
    python3 scripts/object_motion_pools.py PLANTED STIM [STIM ...]    # numpy, onnx, onnxruntime
"""

import json
import sys

import numpy as np
import onnx
import onnxruntime as ort
from onnx import numpy_helper

LAGS, POSITION, K2 = 40, 10, 15


def main(model_path, stimulus_dirs):
    model = onnx.load(model_path)
    weights = {i.name: numpy_helper.to_array(i) for i in model.graph.initializer}
    # Unit 3 weighs both subunit pathways alike: + over the disc, - over the ring.
    kernel = weights["conv2.weight"][3, 0]
    disc, ring = np.clip(kernel, 0, None), np.clip(-kernel, 0, None)
    model.graph.output.append(onnx.helper.make_tensor_value_info("pathways", onnx.TensorProto.FLOAT, None))
    options = ort.SessionOptions()
    options.intra_op_num_threads = 1
    session = ort.InferenceSession(model.SerializeToString(), options)
    name = session.get_inputs()[0].name
    for folder in stimulus_dirs:
        movie = np.load(f"{folder}/movie.npy").astype(np.float32)
        meta = json.load(open(f"{folder}/stimulus.json"))
        diffs = []
        for window in (w for w in meta["windows"] if w["name"] == "global"):
            for t in range(max(window["start"], LAGS - 1), window["end"]):
                pathways = session.run(["pathways"], {name: movie[t - LAGS + 1 : t + 1][None]})[0][0]
                patch = pathways[:2, POSITION : POSITION + K2, POSITION : POSITION + K2]
                diffs.append((patch * disc).sum() - (patch * ring).sum())
        d = np.array(diffs)
        print(
            f"{folder}: disc - ring mean {d.mean():.4f} s.d. {d.std():.4f}, "
            f"rectified mean {np.clip(d, 0, None).mean():.4f}, positive in {(d > 0).mean():.0%} of frames"
        )


if __name__ == "__main__":
    if len(sys.argv) < 3:
        sys.exit(__doc__)
    main(sys.argv[1], sys.argv[2:])
