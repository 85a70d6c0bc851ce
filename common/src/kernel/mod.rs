//! The search kernel (METHOD.md). Work in progress: see the kernel issue.
