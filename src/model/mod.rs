//! Model intake: read the user's ONNX file (tract-onnx's protobuf types), validate it, fold the
//! parts that do not depend on the stimulus, bind the input layout, and produce both our
//! differentiable [`Graph`](crate::engine::Graph) and tract's optimised forward plan.

pub mod builder;
mod fast;
pub mod layout;
mod load;
mod read;
pub mod summary;
pub mod tensor_proto;

pub use fast::FastPath;
pub use layout::{InputBinding, InputLayout};
pub use load::{LoadOptions, Model};
pub use read::{decode_proto, read_proto};
