// Package resilience holds godwit's fault, flood, storm and soak tests: the
// live daemon on an embedded broker (or the deterministic pipeline where
// the wall clock does not matter) put through broker restarts, session
// outages, floods, NaN/Inf and malformed storms, clock jumps, a vanishing
// sensor and a long run. The tests are bounded in time so CI runs them;
// GODWIT_SOAK=5m lengthens the soak.
package resilience
