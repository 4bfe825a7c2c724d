//! Studies: the whole battery (stimulus -> respond -> attribute -> reduce -> knockout for every
//! model, cell and protocol of a study file, then the report), resumable, sharded across a
//! cluster and merged.

pub mod file;
pub mod memory;
pub mod merge;
pub mod plan;
pub mod run;
