// Package configs holds godwit's configuration schema, its strict loader and
// the shipped example configurations.
package configs

// Config is the whole godwit configuration (DESIGN.md, "Configuration").
// Field order follows the YAML file.
type Config struct {
	Vehicle  string   `yaml:"vehicle"`
	Site     Site     `yaml:"site"`
	Broker   Broker   `yaml:"broker"`
	Platform Platform `yaml:"platform"`
	Sensors  []Sensor `yaml:"sensors"`
	Tracker  Tracker  `yaml:"tracker"`
	Timing   Timing   `yaml:"timing"`
	Output   Output   `yaml:"output"`
	Metrics  Metrics  `yaml:"metrics"`
	Health   Health   `yaml:"health"`
	Limits   Limits   `yaml:"limits"`
}

// Site is the origin of the site frame (east-north-up metres), WGS 84.
type Site struct {
	Lat float64 `yaml:"lat"`
	Lon float64 `yaml:"lon"`
	Alt float64 `yaml:"alt"`
}

// Broker is the MQTT connection.
type Broker struct {
	URL          string `yaml:"url"`
	ClientID     string `yaml:"client_id"`
	QoS          int    `yaml:"qos"`
	Username     string `yaml:"username"`
	PasswordFile string `yaml:"password_file"`
	TLS          TLS    `yaml:"tls"`
	// PersistentSession asks the broker to keep the session (subscriptions
	// and queued QoS>0 messages) across reconnects: MQTT CleanSession false
	// with the stable client_id. Extension of the v1 schema; default false.
	PersistentSession bool `yaml:"persistent_session"`
}

// TLS holds PEM file paths; empty CA means the system roots.
type TLS struct {
	CA   string `yaml:"ca"`
	Cert string `yaml:"cert"`
	Key  string `yaml:"key"`
}

// Platform is what the sensors are mounted on.
type Platform struct {
	Motion string `yaml:"motion"` // fixed | moving
	Pose   Pose   `yaml:"pose"`
}

// Pose is a planar pose in the site frame (fixed platform) or a mount on the
// platform (sensor), metres and degrees counter-clockwise from x.
type Pose struct {
	X      float64 `yaml:"x"`
	Y      float64 `yaml:"y"`
	YawDeg float64 `yaml:"yaw_deg"`
}

// Sensor is one configured sensor.
type Sensor struct {
	Name           string    `yaml:"name"`
	Kind           string    `yaml:"kind"` // position_xy | range_bearing | range_bearing_rate | pinhole | gnss | odometry
	Topic          string    `yaml:"topic"`
	Mount          Pose      `yaml:"mount"`
	NoiseSD        []float64 `yaml:"noise_sd"`
	PeriodMS       float64   `yaml:"period_ms"`
	MaxAgeMS       float64   `yaml:"max_age_ms"`
	MaxRange       float64   `yaml:"max_range"`
	FOVDeg         float64   `yaml:"fov_deg"`
	PDetect        float64   `yaml:"p_detect"`
	ClutterPerScan float64   `yaml:"clutter_per_scan"`
	// pinhole only
	FX          float64 `yaml:"fx"`
	CX          float64 `yaml:"cx"`
	RangeSDFrac float64 `yaml:"range_sd_frac"`
}

// Tracker tunes the multi-target tracker.
type Tracker struct {
	Motion       string  `yaml:"motion"` // cv | ca | ctrv
	Filter       string  `yaml:"filter"` // srkf | srekf | srukf | pf
	AccelSD      float64 `yaml:"accel_sd"`
	YawAccelSD   float64 `yaml:"yaw_accel_sd"`
	GateProb     float64 `yaml:"gate_prob"`
	Confirm      Confirm `yaml:"confirm"`
	DeleteMisses int     `yaml:"delete_misses"`
	MaxTracks    int     `yaml:"max_tracks"`
}

// Confirm is the M-of-N confirmation rule.
type Confirm struct {
	Hits int `yaml:"hits"`
	Of   int `yaml:"of"`
}

// Timing is time alignment.
type Timing struct {
	LagMS float64 `yaml:"lag_ms"`
	Clock string  `yaml:"clock"` // synced | estimate
}

// Output is where fused results go.
type Output struct {
	TracksTopic string  `yaml:"tracks_topic"`
	HealthTopic string  `yaml:"health_topic"`
	StatusTopic string  `yaml:"status_topic"`
	RateHz      float64 `yaml:"rate_hz"` // 0: after every scan
}

// Metrics is the Prometheus endpoint.
type Metrics struct {
	Listen string `yaml:"listen"`
}

// Health tunes the watchdogs and the state hysteresis.
type Health struct {
	SilentPeriods float64 `yaml:"silent_periods"`
	RaiseMS       float64 `yaml:"raise_ms"`
	ClearMS       float64 `yaml:"clear_ms"`
	// EventHoldMS: an event (a sequence gap, a late drop, a late arrival,
	// a clock step, a track reset) keeps its condition holding this long.
	EventHoldMS float64 `yaml:"event_hold_ms"`
	// MaxPosSDM: covariance_blowup when a confirmed track's position s.d.
	// passes this bound, m.
	MaxPosSDM float64 `yaml:"max_pos_sd_m"`
	// StepBudgetMS: overrun when one engine step takes longer, ms.
	StepBudgetMS float64 `yaml:"step_budget_ms"`
	// ClockJumpMS: clock_offset_jump when a sensor's clock offset steps by
	// more than this at once, ms.
	ClockJumpMS float64 `yaml:"clock_jump_ms"`
}

// Limits bounds input handling (an extension of the v1 schema).
type Limits struct {
	MaxPayloadBytes int `yaml:"max_payload_bytes"`
	QueueLength     int `yaml:"queue_length"`
	// TimeWindowMS is the plausible window for a measurement's t_ns judged
	// against its arrival time: |arrival − t_ns| above it is rejected as
	// time_implausible. Default 10000 ms.
	TimeWindowMS float64 `yaml:"time_window_ms"`
}
