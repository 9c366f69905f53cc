//! equiscan: SO(3)-equivariant local descriptors for 3D scans.

pub mod so3;
