"""A probe for a redesign of the planted reversal cell (docs/performance.md, session 14): copy the
planted sensor with its direction-selective pathways made opponent, each the rightward-oriented
filter minus the leftward one (or the reverse; the delayed copies likewise), at threshold
THRESHOLD instead of 4, and the reversal units' weights on them times GAIN. An opponent filter is
direction selective at every contrast (motion opponency: Adelson & Bergen, J. Opt. Soc. Am. A
1985), so its output can grow with contrast instead of switching on just above a threshold
that the null direction nearly reaches. Writes the copy to OUT; compare with
`scripts/reversal_bar_variants.py`.

    python3 scripts/opponent_probe.py THRESHOLD GAIN OUT    # numpy, onnx
"""

import sys

import onnx
from onnx import numpy_helper

PLANTED = "models/synthetic-sensor-planted.onnx"
RIGHT, RIGHT_DELAYED, LEFT, LEFT_DELAYED = 4, 5, 6, 7
REVERSAL_UNITS = [1, 2, 4, 5]  # the two reversal units and their caps (docs/models.md)


def main():
    threshold, gain, out = float(sys.argv[1]), float(sys.argv[2]), sys.argv[3]
    model = onnx.load(PLANTED)
    inits = {i.name: i for i in model.graph.initializer}
    k1 = numpy_helper.to_array(inits["conv1.weight"]).copy()
    b1 = numpy_helper.to_array(inits["conv1.bias"]).copy()
    w2 = numpy_helper.to_array(inits["conv2.weight"]).copy()
    right, right_delayed = k1[RIGHT].copy(), k1[RIGHT_DELAYED].copy()
    k1[RIGHT], k1[LEFT] = right - k1[LEFT], k1[LEFT] - right
    k1[RIGHT_DELAYED], k1[LEFT_DELAYED] = right_delayed - k1[LEFT_DELAYED], k1[LEFT_DELAYED] - right_delayed
    b1[RIGHT : LEFT_DELAYED + 1] = -threshold
    for unit in REVERSAL_UNITS:
        w2[unit, RIGHT : LEFT_DELAYED + 1] *= gain
    for name, value in [("conv1.weight", k1), ("conv1.bias", b1), ("conv2.weight", w2)]:
        inits[name].CopyFrom(numpy_helper.from_array(value, name))
    onnx.save(model, out)
    print(f"wrote {out}: opponent pathways at threshold {threshold}, reversal units' gain {gain}")


if __name__ == "__main__":
    main()
