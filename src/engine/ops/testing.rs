//! Test harness shared by every op's unit tests: builds a one-node ONNX model, runs it through
//! tract (an independent implementation of the ONNX operator specification) and through our op,
//! compares the forward values, then checks the op's backward against central finite
//! differences of a random linear functional of the output, accumulated in f64.

use super::{build, BackwardArgs, BuildCtx, Built};
use crate::Tensor;
use ndarray::{ArrayD, IxDyn};
use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use std::collections::HashMap;
use tract_onnx::pb::{self, tensor_proto::DataType, AttributeProto, NodeProto, TensorProto};
use tract_onnx::prelude::*;

/// An attribute value for building test nodes.
pub enum Attr {
    /// Integer.
    I(i64),
    /// Float.
    F(f32),
    /// Integers.
    Is(Vec<i64>),
    /// String.
    S(&'static str),
}

/// A node `op(x0, x1, ...) -> y` whose input count is set by the case.
pub fn node(op: &str, attrs: &[(&str, Attr)]) -> NodeProto {
    node_io(op, &[], attrs)
}

/// A node with explicitly named inputs and output `y`.
pub fn node_io(op: &str, inputs: &[&str], attrs: &[(&str, Attr)]) -> NodeProto {
    NodeProto {
        input: inputs.iter().map(|s| s.to_string()).collect(),
        output: vec!["y".into()],
        name: format!("test_{op}"),
        op_type: op.into(),
        attribute: attrs.iter().map(|(n, a)| attribute(n, a)).collect(),
        ..Default::default()
    }
}

fn attribute(name: &str, a: &Attr) -> AttributeProto {
    use pb::attribute_proto::AttributeType as T;
    let mut p = AttributeProto { name: name.into(), ..Default::default() };
    match a {
        Attr::I(i) => {
            p.i = *i;
            p.r#type = T::Int as i32;
        }
        Attr::F(f) => {
            p.f = *f;
            p.r#type = T::Float as i32;
        }
        Attr::Is(v) => {
            p.ints = v.clone();
            p.r#type = T::Ints as i32;
        }
        Attr::S(s) => {
            p.s = s.as_bytes().to_vec();
            p.r#type = T::String as i32;
        }
    }
    p
}

/// An int64 initializer (shapes, axes, pads).
pub fn ints_init(name: &str, values: &[i64]) -> TensorProto {
    TensorProto {
        name: name.into(),
        dims: vec![values.len() as i64],
        data_type: DataType::Int64 as i32,
        int64_data: values.to_vec(),
        ..Default::default()
    }
}

/// A float scalar initializer.
pub fn scalar_init(name: &str, v: f32) -> TensorProto {
    TensorProto {
        name: name.into(),
        dims: vec![],
        data_type: DataType::Float as i32,
        float_data: vec![v],
        ..Default::default()
    }
}

/// A float initializer with random values (weights the op treats as data, e.g. Conv's W).
pub fn random_init(name: &str, shape: &[usize], seed: u64) -> TensorProto {
    let t = random_tensor(shape, seed, false);
    TensorProto {
        name: name.into(),
        dims: shape.iter().map(|&d| d as i64).collect(),
        data_type: DataType::Float as i32,
        float_data: t.iter().copied().collect(),
        ..Default::default()
    }
}

/// Random values in ±[0.1, 1] (or [0.1, 1] when `positive`), away from the kinks of Relu-like ops.
pub fn random_tensor(shape: &[usize], seed: u64, positive: bool) -> Tensor {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    ArrayD::from_shape_fn(IxDyn(shape), |_| {
        let m: f32 = rng.random_range(0.1..1.0);
        if positive || rng.random_bool(0.5) {
            m
        } else {
            -m
        }
    })
}

/// Check a node whose inputs are all runtime data with the given shapes.
pub fn check_node(mut n: NodeProto, shapes: &[&[usize]]) {
    if n.input.is_empty() {
        n.input = (0..shapes.len()).map(|i| format!("x{i}")).collect();
    }
    check_graph(n, shapes, vec![]);
}

/// As [`check_node`], with strictly positive inputs (for Log, Div denominators).
pub fn check_node_positive(mut n: NodeProto, shapes: &[&[usize]]) {
    if n.input.is_empty() {
        n.input = (0..shapes.len()).map(|i| format!("x{i}")).collect();
    }
    run_case(n, shapes, vec![], true);
}

/// Check a node: its first `shapes.len()` inputs are runtime data, the rest come from `inits`.
pub fn check_graph(n: NodeProto, shapes: &[&[usize]], inits: Vec<TensorProto>) {
    run_case(n, shapes, inits, false);
}

fn run_case(n: NodeProto, shapes: &[&[usize]], inits: Vec<TensorProto>, positive: bool) {
    let data: Vec<Tensor> = shapes.iter().enumerate().map(|(i, s)| random_tensor(s, 17 + i as u64, positive)).collect();
    let expected = tract_forward(&n, &data, &inits);

    let mut values: HashMap<String, Tensor> = HashMap::new();
    for (name, t) in n.input.iter().zip(&data) {
        values.insert(name.clone(), t.clone());
    }
    let constants: HashMap<String, Tensor> = inits
        .iter()
        .map(|t| (t.name.clone(), crate::model::tensor_proto::decode(t).expect("test initializer")))
        .collect();
    for (k, v) in &constants {
        values.insert(k.clone(), v.clone());
    }
    let lookup = |name: &str| constants.get(name);
    let ctx = BuildCtx::new(&n, 18, &lookup);
    let Built { op, data_inputs } = build(&ctx).expect("op is registered").expect("op builds");
    let inputs: Vec<Tensor> = data_inputs.iter().map(|&i| values[&n.input[i]].clone()).collect();
    let refs: Vec<&Tensor> = inputs.iter().collect();
    let out = op.forward(&refs).expect("forward runs");

    assert_eq!(out.shape(), expected.shape(), "{}: output shape differs from tract", n.op_type);
    for (a, b) in out.iter().zip(expected.iter()) {
        let tol = 1e-5 * (1.0 + b.abs());
        assert!((a - b).abs() <= tol, "{}: forward {a} vs tract {b}", n.op_type);
    }

    if super::FOLD_ONLY.contains(&n.op_type.as_str()) {
        return;
    }
    check_gradients(op.as_ref(), &inputs, &out);
}

/// Compare backward with central finite differences of L = sum(w * y) for every data input.
pub fn check_gradients(op: &dyn super::Op, inputs: &[Tensor], out: &Tensor) {
    let w = random_tensor(out.shape(), 99, false);
    let wants = vec![true; inputs.len()];
    let refs: Vec<&Tensor> = inputs.iter().collect();
    let grads =
        op.backward(&BackwardArgs { inputs: &refs, output: out, grad: &w, wants: &wants }).expect("backward runs");
    let objective = |xs: &[Tensor]| -> f64 {
        let r: Vec<&Tensor> = xs.iter().collect();
        let y = op.forward(&r).expect("forward runs");
        y.iter().zip(w.iter()).map(|(a, b)| *a as f64 * *b as f64).sum()
    };
    let eps = 2e-3f32;
    // Rounding noise of the f32 forward, carried into the difference quotient.
    let magnitude: f64 = out.iter().zip(w.iter()).map(|(y, w)| (*y as f64 * *w as f64).powi(2)).sum::<f64>().sqrt();
    let noise = 5e-7 * magnitude / (2.0 * eps as f64);
    for (i, g) in grads.iter().enumerate() {
        let g = g.as_ref().unwrap_or_else(|| panic!("{}: no gradient for input {i}", op.name()));
        assert_eq!(g.shape(), inputs[i].shape(), "{}: gradient shape of input {i}", op.name());
        let n = inputs[i].len();
        let step = (n / 40).max(1);
        for j in (0..n).step_by(step) {
            let mut xs = inputs.to_vec();
            let x0 = xs[i].as_slice_memory_order().expect("standard layout")[j];
            xs[i].as_slice_memory_order_mut().expect("standard layout")[j] = x0 + eps;
            let up = objective(&xs);
            xs[i].as_slice_memory_order_mut().expect("standard layout")[j] = x0 - eps;
            let down = objective(&xs);
            let fd = (up - down) / (2.0 * eps as f64);
            let an = g.as_slice_memory_order().expect("standard layout")[j] as f64;
            let tol = 1e-5 + noise + 1e-3 * an.abs().max(fd.abs());
            assert!(
                (fd - an).abs() <= tol,
                "{}: d/d input {i}[{j}]: backward {an} vs finite difference {fd}",
                op.name()
            );
        }
    }
}

fn value_info(name: &str, shape: Option<&[usize]>) -> pb::ValueInfoProto {
    use pb::tensor_shape_proto::{dimension::Value, Dimension};
    let tensor = pb::type_proto::Tensor {
        elem_type: DataType::Float as i32,
        shape: shape.map(|s| pb::TensorShapeProto {
            dim: s
                .iter()
                .map(|&d| Dimension { value: Some(Value::DimValue(d as i64)), ..Default::default() })
                .collect(),
        }),
    };
    pb::ValueInfoProto {
        name: name.into(),
        r#type: Some(pb::TypeProto { value: Some(pb::type_proto::Value::TensorType(tensor)), ..Default::default() }),
        ..Default::default()
    }
}

/// Run the one-node model through tract and return its single output as f32.
pub fn tract_forward(n: &NodeProto, data: &[Tensor], inits: &[TensorProto]) -> Tensor {
    let graph = pb::GraphProto {
        node: vec![n.clone()],
        name: "test".into(),
        initializer: inits.to_vec(),
        input: n.input.iter().zip(data).map(|(name, t)| value_info(name, Some(t.shape()))).collect(),
        output: vec![value_info("y", None)],
        ..Default::default()
    };
    let model = pb::ModelProto {
        ir_version: 8,
        opset_import: vec![pb::OperatorSetIdProto { domain: String::new(), version: 18 }],
        graph: Some(graph),
        ..Default::default()
    };
    let plan = tract_onnx::onnx()
        .model_for_proto_model(&model)
        .and_then(|m| m.into_optimized())
        .and_then(|m| m.into_runnable())
        .unwrap_or_else(|e| panic!("tract cannot run {}: {e:?}", n.op_type));
    let inputs: TVec<TValue> = data.iter().map(|t| tract_ndarray::ArrayD::clone(t).into_tvalue()).collect();
    let out = plan.run(inputs).unwrap_or_else(|e| panic!("tract fails on {}: {e:?}", n.op_type));
    let t = out[0].cast_to::<f32>().expect("numeric output");
    t.to_plain_array_view::<f32>().expect("f32 output").to_owned()
}
