//! System tests live in tests/*.rs; this library is empty.
