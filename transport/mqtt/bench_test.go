package mqtt

import (
	"testing"

	"github.com/godwit-fusion/godwit/transport"
)

// fakeMessage stands in for paho's message so the callback path can be
// measured without a network.
type fakeMessage struct {
	topic   string
	payload []byte
}

func (m *fakeMessage) Duplicate() bool   { return false }
func (m *fakeMessage) Qos() byte         { return 1 }
func (m *fakeMessage) Retained() bool    { return false }
func (m *fakeMessage) Topic() string     { return m.topic }
func (m *fakeMessage) MessageID() uint16 { return 1 }
func (m *fakeMessage) Payload() []byte   { return m.payload }
func (m *fakeMessage) Ack()              {}

const radar = `{"v":1,"sensor":"front_radar","seq":1042,"t_ns":1764626400123456789,"dets":[{"z":[23.4,0.12,-1.5]},{"z":[41.0,-0.30,0.2],"r":[0.09,0,0,0,0.0001,0,0,0,0.04],"class":"cart","score":0.8},{"z":[7.25,1.1,0.0]}]}`

// BenchmarkCallbackToEngine is the ingest path of issue 4 from the MQTT
// callback to engine input: deliver → Queue.Push, Queue.Pop → Decode.
func BenchmarkCallbackToEngine(b *testing.B) {
	q := transport.NewQueue(1024, 512, transport.DefaultMaxPayloadBytes)
	d, err := transport.NewDecoder([]transport.SensorSpec{{Name: "front_radar", Dim: 3}},
		transport.Limits{PastWindow: -1, FutureWindow: -1})
	if err != nil {
		b.Fatal(err)
	}
	h := deliver(q)
	msg := &fakeMessage{topic: "shuttle-07/sensors/front_radar", payload: []byte(radar)}
	var in transport.Inbound
	var m transport.Measurement
	b.ReportAllocs()
	for b.Loop() {
		h(nil, msg)
		q.Pop(&in)
		if err := d.Decode(in.Payload, in.ArrivalNs, &m); err != nil {
			b.Fatal(err)
		}
	}
}

func TestCallbackAddsNoAllocs(t *testing.T) {
	q := transport.NewQueue(16, 512, transport.DefaultMaxPayloadBytes)
	h := deliver(q)
	msg := &fakeMessage{topic: "t", payload: []byte(radar)}
	var in transport.Inbound
	h(nil, msg)
	q.Pop(&in)
	if a := testing.AllocsPerRun(200, func() { h(nil, msg); q.Pop(&in) }); a != 0 {
		t.Errorf("callback + pop allocates %.1f", a)
	}
}
