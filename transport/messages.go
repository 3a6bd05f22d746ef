// Package transport carries godwit's v1 messages: the MQTT client, the message
// codecs, recordings and an embedded broker for tests and the demo.
package transport

// MaxMeasDim is the largest measurement dimension of any sensor kind
// (range_bearing_rate: [r, b, ṙ]).
const MaxMeasDim = 3

// Measurement is a decoded v1 measurement message (DESIGN.md). A decoder reuses
// one Measurement and its Dets backing array, so decoding allocates nothing in
// steady state.
type Measurement struct {
	V         int
	Sensor    string // configured sensor name (interned by the decoder)
	SensorIdx int    // index of the sensor in the configuration
	Seq       uint64
	TNs       int64 // measurement time, ns since the Unix epoch, sensor clock
	Dets      []Detection
}

// Detection is one element of a measurement's dets list.
type Detection struct {
	Dim      int                              // measurement dimension m
	Z        [MaxMeasDim]float64              // z[0:Dim] in the sensor kind's order
	HasR     bool                             // R given in the message
	R        [MaxMeasDim * MaxMeasDim]float64 // row-major Dim×Dim when HasR
	Class    string                           // optional, interned; "" when absent
	Score    float64                          // optional; valid when HasScore
	HasScore bool
}

// TracksMsg is the v1 tracks message godwit publishes.
type TracksMsg struct {
	V       int
	Vehicle string
	Seq     uint64
	TNs     int64
	Frame   string // always "site"
	Tracks  []Track
	Ego     *Ego // nil for a fixed platform without ego output
}

// Track is one fused track, predicted to the message time.
type Track struct {
	ID        uint64
	Status    string // tentative | confirmed | coasting
	Pos       [2]float64
	Vel       [2]float64
	PosCov    [4]float64 // row-major 2×2
	Model     string     // cv | ca | ctrv
	State     []float64
	StateCov  []float64 // row-major n×n
	UpdatedNs int64
	Hits      int
	Misses    int
	Class     string // "" when unknown (omitted on the wire)
}

// Ego is the platform's own estimate in the site frame.
type Ego struct {
	Pos    [2]float64
	Yaw    float64
	Vel    [2]float64
	PosCov [4]float64
}

// HealthMsg is the v1 health message (retained on output.health_topic).
type HealthMsg struct {
	V         int
	Vehicle   string
	TNs       int64
	State     string // ok | degraded | failed
	Alerts    []Alert
	Sensors   []SensorHealth // in configuration order; encoded as an object keyed by name
	Counters  Counters
	LatencyMS Latency
}

// Alert is one active health alert.
type Alert struct {
	Code     string // sensor_silent, sensor_late, messages_lost, ...
	Severity string // warning | error
	Sensor   string // "" when not about one sensor
	Track    uint64 // 0 when not about one track
	SinceNs  int64
	Detail   string
}

// SensorHealth is one entry of the health message's sensors object.
type SensorHealth struct {
	Name        string
	RateHz      float64
	AgeMS       float64
	Lost        uint64
	Rejected    uint64
	LateDropped uint64
	NISOK       bool
}

// Counters are the message-level counters of the health message.
type Counters struct {
	Rejected    []ReasonCount // encoded as an object {"bad_json":3,...}, fixed order
	LateDropped uint64
}

// ReasonCount is a rejection reason and how often it occurred.
type ReasonCount struct {
	Reason string
	Count  uint64
}

// Latency is the ingest-to-publish latency summary in milliseconds.
type Latency struct {
	P50 float64
	P99 float64
}
