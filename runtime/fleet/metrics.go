package fleet

import (
	"sort"

	"github.com/prometheus/client_golang/prometheus"
)

// maxAlertCodes bounds the code label of godwit_fleet_alerts_active: codes
// come from the network, and an unbounded label set would let one faulty
// vehicle blow up the time-series database (label cardinality, common
// practice in Prometheus instrumentation).
const maxAlertCodes = 64

// collector reads the store at scrape time, so the gauges can never drift
// from what the page shows (Prometheus "custom collector" pattern, as in
// client_golang's own process collector).
type collector struct {
	st        *Store
	connected func() bool

	vehicles, alerts, events, messages, rejected, stale, silenced, watchers, broker *prometheus.Desc
}

func newCollector(st *Store, connected func() bool) *collector {
	return &collector{
		st: st, connected: connected,
		vehicles: prometheus.NewDesc("godwit_fleet_vehicles", "Vehicles known to the monitor, by effective state.",
			[]string{"state"}, nil),
		alerts: prometheus.NewDesc("godwit_fleet_alerts_active", "Active alerts over all vehicles, by code (rare codes as \"other\").",
			[]string{"code"}, nil),
		events: prometheus.NewDesc("godwit_fleet_alert_events_total", "Alert events the monitor recorded, by kind.",
			[]string{"event"}, nil),
		messages: prometheus.NewDesc("godwit_fleet_messages_total", "Messages accepted, by topic kind.",
			[]string{"kind"}, nil),
		rejected: prometheus.NewDesc("godwit_fleet_messages_rejected_total", "Messages refused, by reason.",
			[]string{"reason"}, nil),
		stale: prometheus.NewDesc("godwit_fleet_messages_stale_total",
			"Retained health messages ignored because they were not newer than the known one.", nil, nil),
		silenced: prometheus.NewDesc("godwit_fleet_silences_total",
			"Times a vehicle fell silent (no health message within the silence limit).", nil, nil),
		watchers: prometheus.NewDesc("godwit_fleet_sse_clients", "Open Server-Sent Events streams.", nil, nil),
		broker: prometheus.NewDesc("godwit_fleet_broker_connected", "1 while the monitor is connected to the broker.",
			nil, nil),
	}
}

func (c *collector) Describe(ch chan<- *prometheus.Desc) {
	for _, d := range []*prometheus.Desc{c.vehicles, c.alerts, c.events, c.messages, c.rejected, c.stale,
		c.silenced, c.watchers, c.broker} {
		ch <- d
	}
}

func (c *collector) Collect(ch chan<- prometheus.Metric) {
	states, alerts := c.st.StateCounts()
	for _, s := range States {
		ch <- prometheus.MustNewConstMetric(c.vehicles, prometheus.GaugeValue, float64(states[s]), s)
	}
	codes := make([]string, 0, len(alerts))
	for code := range alerts {
		codes = append(codes, code)
	}
	sort.Strings(codes) // which codes get their own series must not depend on map order
	other, n := 0, 0
	for _, code := range codes {
		k := alerts[code]
		if n < maxAlertCodes && labelSafe(code) {
			ch <- prometheus.MustNewConstMetric(c.alerts, prometheus.GaugeValue, float64(k), code)
			n++
		} else {
			other += k
		}
	}
	if other > 0 {
		ch <- prometheus.MustNewConstMetric(c.alerts, prometheus.GaugeValue, float64(other), "other")
	}
	cn := c.st.Counters()
	ch <- prometheus.MustNewConstMetric(c.events, prometheus.CounterValue, float64(cn.Raised), EventRaised)
	ch <- prometheus.MustNewConstMetric(c.events, prometheus.CounterValue, float64(cn.Cleared), EventCleared)
	ch <- prometheus.MustNewConstMetric(c.messages, prometheus.CounterValue, float64(cn.Health), "health")
	ch <- prometheus.MustNewConstMetric(c.messages, prometheus.CounterValue, float64(cn.Status), "status")
	for _, r := range Reasons {
		ch <- prometheus.MustNewConstMetric(c.rejected, prometheus.CounterValue, float64(cn.Rejected[r]), r)
	}
	ch <- prometheus.MustNewConstMetric(c.stale, prometheus.CounterValue, float64(cn.Stale))
	ch <- prometheus.MustNewConstMetric(c.silenced, prometheus.CounterValue, float64(cn.Silenced))
	ch <- prometheus.MustNewConstMetric(c.watchers, prometheus.GaugeValue, float64(c.st.Watchers()))
	up := 0.0
	if c.connected != nil && c.connected() {
		up = 1
	}
	ch <- prometheus.MustNewConstMetric(c.broker, prometheus.GaugeValue, up)
}

// labelSafe admits the codes godwit itself uses (snake case, short); a label
// value may be any UTF-8, but a code that does not look like one is more
// likely garbage than a new watchdog.
func labelSafe(code string) bool {
	if code == "" || len(code) > 48 {
		return false
	}
	for i := 0; i < len(code); i++ {
		c := code[i]
		if !(c >= 'a' && c <= 'z' || c >= '0' && c <= '9' || c == '_') {
			return false
		}
	}
	return true
}
