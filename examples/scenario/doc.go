// Package scenario reads godwit's scenario files and simulates them: an
// invented scene (a platform on a route or a fixed post, targets with simple
// motion) measured by the sensors of a paired configuration, with detection
// probability, Poisson clutter, coverage limits, noise, latency and jitter,
// clock offsets, dropouts, losses and malformed messages. The result is a
// recording in arrival order and the ground truth, both in DESIGN.md's
// formats. The format is documented in examples/scenarios/README.md.
//
//	sc, err := scenario.Open("campus-shuttle") // a shipped name or a file path
//	out, err := sc.Simulate(scenario.Options{Seconds: 20})
//	for _, m := range out.Messages { /* m.RxNs, m.Topic, m.Payload */ }
//
// A run is a pure function of the scenario and the seed: each sensor draws
// from its own PCG stream (math/rand/v2), times are integer nanoseconds from
// the scenario's fixed start, and nothing iterates a map into the output.
package scenario
