package fleet

import (
	"fmt"
	"math"
	"sort"
	"strings"
	"sync"
	"time"
)

// Defaults of StoreConfig.
const (
	DefaultTopicRoot   = "godwit"
	DefaultSilentAfter = 5 * time.Second
	DefaultHistory     = 1000
	DefaultMaxVehicles = 10000
)

// Effective vehicle states. The first three are what the vehicle reports;
// the monitor adds what it sees of the link.
const (
	StateOK       = "ok"
	StateDegraded = "degraded"
	StateFailed   = "failed"
	StateSilent   = "silent"  // no health message for longer than SilentAfter
	StateOffline  = "offline" // status topic says offline (last will or clean stop)
	StateUnknown  = "unknown" // status seen, no health message yet
)

// States lists the effective states in a fixed order (metrics, page).
var States = []string{StateOK, StateDegraded, StateFailed, StateSilent, StateOffline, StateUnknown}

// Event kinds of the alert history.
const (
	EventRaised  = "raised"  // an alert appeared in a vehicle's health message
	EventCleared = "cleared" // an alert left it
	EventState   = "state"   // the vehicle's effective state changed
)

// StoreConfig tunes a Store; zero values take the defaults above.
type StoreConfig struct {
	TopicRoot   string        // health on ROOT/<vehicle>/health, status on ROOT/<vehicle>/status
	SilentAfter time.Duration // a vehicle with no health for longer is silent
	History     int           // events kept in the alert history ring
	MaxVehicles int           // vehicles tracked at most; more are refused and counted
}

func (c StoreConfig) withDefaults() StoreConfig {
	if c.TopicRoot == "" {
		c.TopicRoot = DefaultTopicRoot
	}
	if c.SilentAfter <= 0 {
		c.SilentAfter = DefaultSilentAfter
	}
	if c.History <= 0 {
		c.History = DefaultHistory
	}
	if c.MaxVehicles <= 0 {
		c.MaxVehicles = DefaultMaxVehicles
	}
	return c
}

// Event is one entry of the alert history.
type Event struct {
	Seq      uint64 `json:"seq"`
	AtNs     int64  `json:"at_ns"` // monitor clock: when the monitor saw it
	Vehicle  string `json:"vehicle"`
	Kind     string `json:"event"` // raised | cleared | state
	Code     string `json:"code,omitempty"`
	Sensor   string `json:"sensor,omitempty"`
	Track    uint64 `json:"track,omitempty"`
	Severity string `json:"severity,omitempty"`
	SinceNs  int64  `json:"since_ns,omitempty"` // vehicle clock: when the alert began
	Detail   string `json:"detail,omitempty"`
	From     string `json:"from,omitempty"` // state events
	To       string `json:"to,omitempty"`
}

// Counters are the store's message counters.
type Counters struct {
	Health   uint64            // health messages accepted
	Status   uint64            // status messages accepted
	Stale    uint64            // retained health not newer than what is known, ignored
	Rejected map[string]uint64 // by reason (every reason present)
	Raised   uint64            // alert raised events
	Cleared  uint64            // alert cleared events
	Silenced uint64            // times a vehicle fell silent
}

type vehicle struct {
	id          string
	health      *Health // latest accepted; nil before the first
	status      string  // "online", "offline" or "" before the first
	offline     bool
	silent      bool
	lastHeardNs int64 // monitor clock: last proof of life (or when first noticed)
	lastSeenNs  int64 // monitor clock: last live (not retained) health message
	messages    uint64
	rejected    uint64
	ver         uint64
	state       string // effective state, kept to notice changes
}

func (v *vehicle) effective() string {
	switch {
	case v.offline:
		return StateOffline
	case v.silent:
		return StateSilent
	case v.health == nil:
		return StateUnknown
	default:
		return v.health.State
	}
}

// Store is the monitor's state: each vehicle's latest health and link
// state, and the alert history. Like the engine it reads no clock: every
// call carries the monitor's time, so tests drive silence detection with a
// clock of their own. Safe for concurrent use.
type Store struct {
	cfg StoreConfig

	mu       sync.Mutex
	dec      healthDecoder
	vehicles map[string]*vehicle
	hist     []Event // ring of cfg.History
	histHead int     // index of the oldest event
	ver      uint64  // bumped on every change; vehicle.ver and Event.Seq come from it
	counters Counters
	watchers map[chan struct{}]struct{}
}

// NewStore makes an empty store.
func NewStore(cfg StoreConfig) *Store {
	cfg = cfg.withDefaults()
	s := &Store{cfg: cfg, vehicles: map[string]*vehicle{}, watchers: map[chan struct{}]struct{}{}}
	s.counters.Rejected = map[string]uint64{}
	for _, r := range Reasons {
		s.counters.Rejected[r] = 0
	}
	return s
}

// Config returns the configuration in use (defaults filled in).
func (s *Store) Config() StoreConfig { return s.cfg }

// Filters are the MQTT subscription filters for the topic root, as shared
// subscriptions ($share/GROUP/…, MQTT 5.0 §4.8.2) when group is not empty.
func (s *Store) Filters(group string) []string {
	f := []string{s.cfg.TopicRoot + "/+/health", s.cfg.TopicRoot + "/+/status"}
	if group != "" {
		for i := range f {
			f[i] = "$share/" + group + "/" + f[i]
		}
	}
	return f
}

// Handle takes one received MQTT message at monitor time atNs. retained
// is the MQTT retain flag: a retained message may be old news replayed by
// the broker, so it is never taken as proof that the vehicle is alive now.
// It returns a *RejectError when the message was refused (counted; the
// state is unchanged), else nil.
func (s *Store) Handle(topic string, payload []byte, retained bool, atNs int64) error {
	id, kind, ok := s.split(topic)
	if !ok {
		return s.refuse(nil, reject(topic, ReasonBadField, "topic is not %s/<vehicle>/health or /status", s.cfg.TopicRoot))
	}
	if len(payload) == 0 {
		// A zero-byte retained message deletes the retained one (MQTT 3.1.1
		// §3.3.1.3); it says nothing about the vehicle.
		return nil
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	v := s.vehicles[id]
	if kind == "status" {
		st := strings.TrimSpace(string(payload))
		if st != "online" && st != "offline" {
			return s.refuseLocked(v, reject(topic, ReasonBadStatus, "status is %.40q, want online or offline", st))
		}
		if v = s.vehicleLocked(id); v == nil {
			return s.refuseLocked(nil, reject(topic, ReasonTooManyVehicles, "already %d vehicles", s.cfg.MaxVehicles))
		}
		s.counters.Status++
		v.status = st
		v.offline = st == "offline"
		if !v.offline {
			// Online starts the silence clock: a vehicle that announces
			// itself and then sends no health is silent.
			if !retained || v.lastHeardNs == 0 {
				v.lastHeardNs = max(v.lastHeardNs, atNs)
			}
			if !retained {
				v.silent = false
			}
		}
		s.changedLocked(v, atNs)
		return nil
	}
	h, err := s.dec.decode(topic, payload)
	if err != nil {
		return s.refuseLocked(v, err.(*RejectError))
	}
	if h.Vehicle != id {
		return s.refuseLocked(v, reject(topic, ReasonVehicleMismatch, "message names vehicle %.40q, topic names %q", h.Vehicle, id))
	}
	if retained && v != nil && v.health != nil && h.TNs <= v.health.TNs {
		s.counters.Stale++ // the broker replaying what we already have
		return nil
	}
	if v = s.vehicleLocked(id); v == nil {
		return s.refuseLocked(nil, reject(topic, ReasonTooManyVehicles, "already %d vehicles", s.cfg.MaxVehicles))
	}
	s.counters.Health++
	v.messages++
	s.diffAlertsLocked(v, v.health, h, atNs)
	v.health = h
	if retained {
		if v.lastHeardNs == 0 {
			v.lastHeardNs = atNs // benefit of the doubt for one silence window
		}
	} else {
		v.lastHeardNs, v.lastSeenNs = atNs, atNs
		v.silent = false
		v.offline = false // a live message is proof of life even if "online" went elsewhere
	}
	s.changedLocked(v, atNs)
	return nil
}

// Sweep marks vehicles that have sent no health message for longer than
// SilentAfter as silent, at monitor time nowNs. Call it often (the monitor
// does every SilentAfter/10): silence needs no message to be noticed, so
// a vehicle that loses power without a last will is still seen to go.
func (s *Store) Sweep(nowNs int64) {
	s.mu.Lock()
	defer s.mu.Unlock()
	limit := s.cfg.SilentAfter.Nanoseconds()
	for _, v := range s.vehicles {
		if v.offline || v.silent || v.lastHeardNs == 0 || nowNs-v.lastHeardNs <= limit {
			continue
		}
		v.silent = true
		s.counters.Silenced++
		s.changedLocked(v, nowNs)
	}
}

func (s *Store) split(topic string) (id, kind string, ok bool) {
	rest, found := strings.CutPrefix(topic, s.cfg.TopicRoot+"/")
	if !found {
		return "", "", false
	}
	id, kind, found = strings.Cut(rest, "/")
	if !found || id == "" || len(id) > maxStringBytes || (kind != "health" && kind != "status") {
		return "", "", false
	}
	return id, kind, true
}

func (s *Store) vehicleLocked(id string) *vehicle {
	if v := s.vehicles[id]; v != nil {
		return v
	}
	if len(s.vehicles) >= s.cfg.MaxVehicles {
		return nil
	}
	v := &vehicle{id: id, state: ""}
	s.vehicles[id] = v
	return v
}

func (s *Store) refuse(v *vehicle, e *RejectError) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.refuseLocked(v, e)
}

func (s *Store) refuseLocked(v *vehicle, e *RejectError) error {
	s.counters.Rejected[e.Reason]++
	if v != nil {
		v.rejected++
	}
	return e
}

type alertKey struct {
	code, sensor string
	track        uint64
}

// diffAlertsLocked turns the difference between two successive health
// messages of a vehicle into raised and cleared events.
func (s *Store) diffAlertsLocked(v *vehicle, old, cur *Health, atNs int64) {
	had := map[alertKey]bool{}
	if old != nil {
		for _, a := range old.Alerts {
			had[alertKey{a.Code, a.Sensor, a.Track}] = true
		}
	}
	now := map[alertKey]bool{}
	for _, a := range cur.Alerts {
		k := alertKey{a.Code, a.Sensor, a.Track}
		if now[k] {
			continue // the same alert twice in one message counts once
		}
		now[k] = true
		if !had[k] {
			s.counters.Raised++
			s.appendLocked(Event{AtNs: atNs, Vehicle: v.id, Kind: EventRaised, Code: a.Code, Sensor: a.Sensor,
				Track: a.Track, Severity: a.Severity, SinceNs: a.SinceNs, Detail: a.Detail})
		}
	}
	if old == nil {
		return
	}
	for _, a := range old.Alerts {
		k := alertKey{a.Code, a.Sensor, a.Track}
		if had[k] && !now[k] {
			had[k] = false
			s.counters.Cleared++
			s.appendLocked(Event{AtNs: atNs, Vehicle: v.id, Kind: EventCleared, Code: a.Code, Sensor: a.Sensor,
				Track: a.Track, Severity: a.Severity, SinceNs: a.SinceNs, Detail: a.Detail})
		}
	}
}

// changedLocked records that v changed: a new version, a state event when
// the effective state moved, and a wake-up for the watchers.
func (s *Store) changedLocked(v *vehicle, atNs int64) {
	if st := v.effective(); st != v.state {
		ev := Event{AtNs: atNs, Vehicle: v.id, Kind: EventState, From: v.state, To: st}
		if st == StateSilent {
			ev.Detail = fmt.Sprintf("no health message for more than %v", s.cfg.SilentAfter)
		}
		s.appendLocked(ev)
		v.state = st
	}
	s.ver++
	v.ver = s.ver
	for ch := range s.watchers {
		select {
		case ch <- struct{}{}:
		default: // already woken; the watcher reads every change since its version
		}
	}
}

func (s *Store) appendLocked(ev Event) {
	s.ver++
	ev.Seq = s.ver
	if len(s.hist) < s.cfg.History {
		s.hist = append(s.hist, ev)
		return
	}
	s.hist[s.histHead] = ev
	s.histHead = (s.histHead + 1) % len(s.hist)
}

// Watch returns a channel that receives a value (coalesced) whenever the
// store changes, and a function that stops the watch.
func (s *Store) Watch() (<-chan struct{}, func()) {
	ch := make(chan struct{}, 1)
	s.mu.Lock()
	s.watchers[ch] = struct{}{}
	s.mu.Unlock()
	return ch, func() {
		s.mu.Lock()
		delete(s.watchers, ch)
		s.mu.Unlock()
	}
}

// Watchers is the number of active watches (SSE clients).
func (s *Store) Watchers() int {
	s.mu.Lock()
	defer s.mu.Unlock()
	return len(s.watchers)
}

// Snapshot is a consistent view of the store.
type Snapshot struct {
	Version  uint64        `json:"version"`
	NowNs    int64         `json:"now_ns"` // monitor clock when the view was taken
	Vehicles []VehicleView `json:"vehicles"`
	Events   []Event       `json:"events"`
}

// VehicleView is one vehicle as the API and the page show it.
type VehicleView struct {
	Vehicle     string       `json:"vehicle"`
	State       string       `json:"state"`                    // effective: ok … unknown
	Reported    string       `json:"reported_state,omitempty"` // from the latest health message
	Status      string       `json:"status,omitempty"`         // latest status topic payload
	LastSeenNs  int64        `json:"last_seen_ns"`             // monitor clock, 0: never live
	HealthTNs   int64        `json:"health_t_ns,omitempty"`    // vehicle clock of the latest health
	Alerts      []AlertView  `json:"alerts"`
	Sensors     []SensorView `json:"sensors"`
	Rejected    uint64       `json:"rejected_total"` // the vehicle's own rejected inputs
	LateDropped uint64       `json:"late_dropped"`
	LatencyP50  *float64     `json:"latency_p50_ms"`
	LatencyP99  *float64     `json:"latency_p99_ms"`
	Messages    uint64       `json:"messages"`     // health messages the monitor accepted
	BadMessages uint64       `json:"bad_messages"` // refused by the monitor
	Version     uint64       `json:"version"`
}

// AlertView is an active alert of a vehicle.
type AlertView struct {
	Code     string `json:"code"`
	Severity string `json:"severity,omitempty"`
	Sensor   string `json:"sensor,omitempty"`
	Track    uint64 `json:"track,omitempty"`
	SinceNs  int64  `json:"since_ns"`
	Detail   string `json:"detail,omitempty"`
}

// SensorView is one sensor of a vehicle's latest health message.
type SensorView struct {
	Name        string   `json:"name"`
	RateHz      *float64 `json:"rate_hz"` // null: not known
	AgeMS       *float64 `json:"age_ms"`  // null or negative: never heard
	Lost        uint64   `json:"lost"`
	Rejected    uint64   `json:"rejected"`
	LateDropped uint64   `json:"late_dropped"`
	NISOK       bool     `json:"nis_ok"`
}

func finite(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

func (v *vehicle) view() VehicleView {
	vv := VehicleView{Vehicle: v.id, State: v.effective(), Status: v.status, LastSeenNs: v.lastSeenNs,
		Messages: v.messages, BadMessages: v.rejected, Version: v.ver,
		Alerts: []AlertView{}, Sensors: []SensorView{}}
	h := v.health
	if h == nil {
		return vv
	}
	vv.Reported, vv.HealthTNs, vv.LateDropped = h.State, h.TNs, h.Late
	vv.LatencyP50, vv.LatencyP99 = finite(h.LatencyMS.P50), finite(h.LatencyMS.P99)
	for _, rc := range h.Rejected {
		vv.Rejected += rc.Count
	}
	for _, a := range h.Alerts {
		vv.Alerts = append(vv.Alerts, AlertView{Code: a.Code, Severity: a.Severity, Sensor: a.Sensor,
			Track: a.Track, SinceNs: a.SinceNs, Detail: a.Detail})
	}
	for _, sh := range h.Sensors {
		vv.Sensors = append(vv.Sensors, SensorView{Name: sh.Name, RateHz: finite(sh.RateHz), AgeMS: finite(sh.AgeMS),
			Lost: sh.Lost, Rejected: sh.Rejected, LateDropped: sh.LateDropped, NISOK: sh.NISOK})
	}
	return vv
}

// Changes returns the vehicles changed and the events appended after
// version since (0: everything), sorted by vehicle name and by sequence,
// and the version they bring the caller to.
func (s *Store) Changes(since uint64, nowNs int64) Snapshot {
	s.mu.Lock()
	defer s.mu.Unlock()
	snap := Snapshot{Version: s.ver, NowNs: nowNs, Vehicles: []VehicleView{}, Events: []Event{}}
	for _, v := range s.vehicles {
		if v.ver > since {
			snap.Vehicles = append(snap.Vehicles, v.view())
		}
	}
	sort.Slice(snap.Vehicles, func(i, j int) bool { return snap.Vehicles[i].Vehicle < snap.Vehicles[j].Vehicle })
	for i := range s.hist {
		ev := s.hist[(s.histHead+i)%len(s.hist)]
		if ev.Seq > since {
			snap.Events = append(snap.Events, ev)
		}
	}
	return snap
}

// Vehicle returns one vehicle's view.
func (s *Store) Vehicle(id string) (VehicleView, bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	v := s.vehicles[id]
	if v == nil {
		return VehicleView{}, false
	}
	return v.view(), true
}

// Counters copies the message counters.
func (s *Store) Counters() Counters {
	s.mu.Lock()
	defer s.mu.Unlock()
	c := s.counters
	c.Rejected = make(map[string]uint64, len(s.counters.Rejected))
	for k, n := range s.counters.Rejected {
		c.Rejected[k] = n
	}
	return c
}

// StateCounts is the number of vehicles in each effective state (every
// state present), and the number of active alerts by code.
func (s *Store) StateCounts() (states map[string]int, alerts map[string]int) {
	s.mu.Lock()
	defer s.mu.Unlock()
	states = make(map[string]int, len(States))
	for _, st := range States {
		states[st] = 0
	}
	alerts = map[string]int{}
	for _, v := range s.vehicles {
		states[v.effective()]++
		if v.health != nil {
			for _, a := range v.health.Alerts {
				alerts[a.Code]++
			}
		}
	}
	return states, alerts
}
