//! The batch run log (`run-log.txt`).
