#!/usr/bin/env python3
"""Run sufficit's exported reduced model through the ONNX checker and onnxruntime.

Used by tests/reduce.rs (exported_reduced_model_runs_the_same_in_onnxruntime). The model and
its input are written by that test with SUFFICIT_WRITE_FIXTURES=1; this script then records
what the open standard's reference runtime computes for them:

    SUFFICIT_WRITE_FIXTURES=1 cargo test --release --test reduce exported_reduced
    pip install onnx==1.23.2 onnxruntime==1.32.0 numpy
    python3 scripts/check_reduced_onnxruntime.py   # writes tests/fixtures/reduced/onnxruntime.json
"""
import json
import os

import numpy as np
import onnx
import onnxruntime as ort

DIR = os.path.join(os.path.dirname(__file__), "..", "tests", "fixtures", "reduced")

model = onnx.load(os.path.join(DIR, "planted_reduced.onnx"))
onnx.checker.check_model(model, full_check=True)
x = np.load(os.path.join(DIR, "input.npy")).astype(np.float32)
session = ort.InferenceSession(os.path.join(DIR, "planted_reduced.onnx"), providers=["CPUExecutionProvider"])
(out,) = session.run(None, {session.get_inputs()[0].name: x})
with open(os.path.join(DIR, "onnxruntime.json"), "w") as f:
    json.dump(
        {
            "onnx": onnx.__version__,
            "onnxruntime": ort.__version__,
            "numpy": np.__version__,
            "checker": "onnx.checker.check_model(full_check=True) passed",
            "output_shape": list(out.shape),
            "output": out.astype(float).ravel().tolist(),
        },
        f,
        indent=1,
    )
print("wrote", os.path.join(DIR, "onnxruntime.json"), out.shape)
