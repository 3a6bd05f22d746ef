package daemon

import "github.com/godwit-fusion/godwit/transport"

// measurementTNs finds the measurement time of a recorded payload the way
// the v1 contract checker (check-v1 replay-out) does when it judges the
// stamp of a replay's final tracks message: any payload that is a JSON
// object with an integer t_ns and a list dets counts, whatever its topic,
// its sensor, or the decoder's verdict on it. The rule lives with the
// payload parser in transport.
func measurementTNs(payload []byte) (int64, bool) {
	return transport.MeasurementTNs(payload)
}
