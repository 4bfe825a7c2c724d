//! Reading the bytes of an ONNX file into its protobuf structure, with errors that say what the
//! file is and what was expected of it.

use crate::{Error, Result};
use prost::Message;
use std::path::Path;
use tract_onnx::pb::ModelProto;

/// Read and decode `path` as an ONNX ModelProto.
pub fn read_proto(path: &Path) -> Result<ModelProto> {
    let bytes = std::fs::read(path).map_err(|e| Error::io("read the model", path, e))?;
    decode_proto(&bytes, path)
}

/// As [`read_proto`], from the file's bytes (`path` names it in messages).
pub fn decode_proto(bytes: &[u8], path: &Path) -> Result<ModelProto> {
    let model_error = |message: String| Error::input(path, message);
    if bytes.is_empty() {
        return Err(model_error("is empty; expected an ONNX model (.onnx)".into()));
    }
    let proto = ModelProto::decode(bytes).map_err(|e| {
        model_error(format!(
            "is not a readable ONNX model: protobuf decoding failed ({e}). The file may be \
             truncated (an interrupted copy or download) or not an ONNX file at all; export it \
             again with torch.onnx.export or tf2onnx"
        ))
    })?;
    match &proto.graph {
        Some(g) if !g.node.is_empty() => Ok(proto),
        _ => Err(model_error(
            "decodes as protobuf but holds no ONNX graph with nodes; it may be damaged or \
             another kind of file"
                .into(),
        )),
    }
}
