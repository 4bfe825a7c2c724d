//! The affine prefix: the part of the graph between the input and the first nonlinearity.
//! Along a straight path x' + a (x - x') its values are exactly z' + a (z - z'), so they are
//! interpolated instead of recomputed, and input gradients pass through it once.

use crate::engine::{Graph, Source, ValueId};

/// Ops that are affine in their single stimulus-dependent input when every other input is a
/// parameter.
const AFFINE: &[&str] = &[
    "Conv",
    "Gemm",
    "MatMul",
    "Add",
    "Sub",
    "Mul",
    "Div",
    "BatchNormalization",
    "Flatten",
    "Reshape",
    "Transpose",
    "Squeeze",
    "Unsqueeze",
    "Slice",
    "Pad",
    "Identity",
    "AveragePool",
    "GlobalAveragePool",
    "ReduceMean",
    "ReduceSum",
];

/// The single value where the affine prefix ends (consumed by the first non-affine op), if the
/// graph has one; `None` means the first op is already nonlinear or the prefix branches.
pub fn frontier(g: &Graph) -> Option<ValueId> {
    let mut affine = vec![false; g.values.len()];
    affine[g.input] = true;
    for n in &g.nodes {
        let dynamic: Vec<ValueId> =
            n.inputs.iter().copied().filter(|&i| !matches!(g.values[i].source, Source::Param(_))).collect();
        let divides_by_data = n.op.name() == "Div" && n.inputs.get(1).is_some_and(|&i| dynamic.contains(&i));
        affine[n.output] =
            AFFINE.contains(&n.op.name()) && dynamic.len() == 1 && affine[dynamic[0]] && !divides_by_data;
    }
    let mut ends: Vec<ValueId> = Vec::new();
    for n in &g.nodes {
        if affine[n.output] {
            continue;
        }
        for &i in &n.inputs {
            if affine[i] && !matches!(g.values[i].source, Source::Param(_)) && !ends.contains(&i) {
                ends.push(i);
            }
        }
    }
    match ends.as_slice() {
        [z] if *z != g.input => Some(*z),
        _ => None,
    }
}
