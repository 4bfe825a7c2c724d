//! Converting ONNX TensorProto (initializers, Constant values) to and from f32 tensors.
//! Every value inside the engine is f32; integer tensors (shapes, axes) are exact in f32 up to
//! 2^24, far above any shape an encoding model uses.

use crate::Tensor;
use ndarray::{ArrayD, IxDyn};
use tract_onnx::pb::{tensor_proto::DataType, TensorProto};

/// Decode a TensorProto into an f32 tensor, or say why it cannot be.
pub fn decode(t: &TensorProto) -> Result<Tensor, String> {
    if t.data_location == Some(1) || !t.external_data.is_empty() {
        return Err(format!(
            "tensor '{}' keeps its data in an external file; re-export the model with the \
             weights embedded (onnx.save(..., save_as_external_data=False))",
            t.name
        ));
    }
    let shape: Vec<usize> = t
        .dims
        .iter()
        .map(|&d| usize::try_from(d).map_err(|_| format!("tensor '{}' has dims {:?}", t.name, t.dims)))
        .collect::<Result<_, _>>()?;
    let count = shape.iter().try_fold(1usize, |n, &d| n.checked_mul(d)).ok_or_else(|| {
        format!("tensor '{}' declares dims {:?}, more values than this machine can address", t.name, t.dims)
    })?;
    let values: Vec<f32> = match DataType::try_from(t.data_type) {
        Ok(DataType::Float) if t.raw_data.is_empty() => t.float_data.clone(),
        Ok(DataType::Float) => le_chunks::<4>(&t.raw_data).map(f32::from_le_bytes).collect(),
        Ok(DataType::Double) if t.raw_data.is_empty() => t.double_data.iter().map(|&v| v as f32).collect(),
        Ok(DataType::Double) => le_chunks::<8>(&t.raw_data).map(|b| f64::from_le_bytes(b) as f32).collect(),
        Ok(DataType::Int64) if t.raw_data.is_empty() => t.int64_data.iter().map(|&v| v as f32).collect(),
        Ok(DataType::Int64) => le_chunks::<8>(&t.raw_data).map(|b| i64::from_le_bytes(b) as f32).collect(),
        Ok(DataType::Int32) if t.raw_data.is_empty() => t.int32_data.iter().map(|&v| v as f32).collect(),
        Ok(DataType::Int32) => le_chunks::<4>(&t.raw_data).map(|b| i32::from_le_bytes(b) as f32).collect(),
        Ok(DataType::Bool | DataType::Int8 | DataType::Uint8) if t.raw_data.is_empty() => {
            t.int32_data.iter().map(|&v| v as f32).collect()
        }
        Ok(DataType::Bool | DataType::Uint8) => t.raw_data.iter().map(|&v| v as f32).collect(),
        Ok(DataType::Int8) => t.raw_data.iter().map(|&v| v as i8 as f32).collect(),
        other => {
            return Err(format!(
                "tensor '{}' has data type {:?}; sufficit reads float, double, int8/32/64, \
                 uint8 and bool tensors",
                t.name,
                other.map(|d| d.as_str_name()).unwrap_or("unknown")
            ))
        }
    };
    if values.len() != count {
        return Err(format!(
            "tensor '{}' declares shape {:?} ({count} values) but holds {} values; the file is \
             damaged or was written by a broken exporter",
            t.name,
            shape,
            values.len()
        ));
    }
    ArrayD::from_shape_vec(IxDyn(&shape), values).map_err(|e| format!("tensor '{}': {e}", t.name))
}

fn le_chunks<const N: usize>(raw: &[u8]) -> impl Iterator<Item = [u8; N]> + '_ {
    raw.chunks_exact(N).map(|c| {
        let mut b = [0u8; N];
        b.copy_from_slice(c);
        b
    })
}

/// Encode an f32 tensor as a float TensorProto named `name` (raw little-endian data).
pub fn encode_f32(name: &str, t: &Tensor) -> TensorProto {
    TensorProto {
        name: name.into(),
        dims: t.shape().iter().map(|&d| d as i64).collect(),
        data_type: DataType::Float as i32,
        raw_data: t.iter().flat_map(|v| v.to_le_bytes()).collect(),
        ..Default::default()
    }
}

/// Encode an f32 tensor holding integers as an int64 TensorProto (shapes, axes).
pub fn encode_i64(name: &str, t: &Tensor) -> TensorProto {
    TensorProto {
        name: name.into(),
        dims: t.shape().iter().map(|&d| d as i64).collect(),
        data_type: DataType::Int64 as i32,
        int64_data: t.iter().map(|&v| v as i64).collect(),
        ..Default::default()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn raw_and_typed_float_data_decode_alike() {
        let t = ArrayD::from_shape_vec(IxDyn(&[2, 2]), vec![1.0, -2.5, 3.0, 4.25]).unwrap();
        let raw = encode_f32("w", &t);
        let typed = TensorProto { float_data: t.iter().copied().collect(), raw_data: vec![], ..raw.clone() };
        assert_eq!(decode(&raw).unwrap(), t);
        assert_eq!(decode(&typed).unwrap(), t);
    }

    #[test]
    fn a_count_mismatch_is_reported_with_the_tensor_name() {
        let bad = TensorProto {
            name: "conv1.weight".into(),
            dims: vec![3],
            data_type: DataType::Float as i32,
            float_data: vec![1.0],
            ..Default::default()
        };
        let e = decode(&bad).unwrap_err();
        assert!(e.contains("conv1.weight") && e.contains("3 values"), "{e}");
    }
}
