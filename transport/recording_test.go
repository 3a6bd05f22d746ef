package transport

import (
	"bytes"
	"encoding/json"
	"errors"
	"io"
	"strings"
	"testing"
	"time"
)

type recIn struct {
	rx      int64
	topic   string
	qos     byte
	retain  bool
	payload string
}

var recSample = []recIn{
	{tArrival, "shuttle-07/sensors/front_radar", 1, false, radarJSON},
	{tArrival + 1, "shuttle-07/sensors/front_radar", 0, false, "{\n  \"v\": 1,\r\n  \"sensor\": \"gnss\"\n}"}, // pretty-printed
	{tArrival + 2, "shuttle-07/status", 1, true, "online"},
	{tArrival + 3, "shuttle-07/sensors/odd", 2, false, "\x00\xff binary"},
	{tArrival + 4, "shuttle-07/sensors/front_radar", 1, false, `[1,2]`},   // JSON but not an object
	{tArrival + 5, "shuttle-07/sensors/front_radar", 1, false, `{"v":1,`}, // broken JSON
	{tArrival + 6, "shuttle-07/sensors/\"quoted\"", 1, false, ""},
}

func writeSample(t *testing.T, w io.Writer) {
	t.Helper()
	rw, err := NewRecordWriter(w, RecordOptions{Note: "warehouse robot aisle 3", Created: time.Date(2026, 12, 1, 21, 0, 0, 0, time.UTC), FlushEvery: -1})
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range recSample {
		if err := rw.Write(r.rx, r.topic, r.qos, r.retain, []byte(r.payload)); err != nil {
			t.Fatal(err)
		}
	}
	if err := rw.Close(); err != nil {
		t.Fatal(err)
	}
	if rw.Count() != uint64(len(recSample)) {
		t.Errorf("count %d", rw.Count())
	}
}

func TestRecordingRoundTrip(t *testing.T) {
	var buf bytes.Buffer
	writeSample(t, &buf)
	lines := strings.Split(strings.TrimSuffix(buf.String(), "\n"), "\n")
	if len(lines) != len(recSample)+1 {
		t.Fatalf("%d lines, want %d", len(lines), len(recSample)+1)
	}
	// Every line is one JSON object (JSON Lines) per encoding/json.
	for i, l := range lines {
		var o map[string]any
		if err := json.Unmarshal([]byte(l), &o); err != nil {
			t.Fatalf("line %d: %v: %s", i+1, err, l)
		}
		if i == 0 {
			if o["godwit_recording"] != 1.0 || o["created"] != "2026-12-01T21:00:00Z" || o["note"] != "warehouse robot aisle 3" {
				t.Errorf("header %v", o)
			}
			continue
		}
		_, asJSON := o["payload"]
		_, asB64 := o["payload_b64"]
		wantJSON := i <= 2 // the first two payloads are JSON objects
		if asJSON != wantJSON || asB64 == wantJSON {
			t.Errorf("line %d: payload %v payload_b64 %v", i+1, asJSON, asB64)
		}
	}

	rr := NewRecordReader(&buf, 0)
	var rec Record
	for i, want := range recSample {
		if err := rr.Next(&rec); err != nil {
			t.Fatalf("record %d: %v", i, err)
		}
		wantPayload := want.payload
		if i == 1 {
			// Line breaks inside a JSON payload become spaces: same length,
			// same JSON value.
			wantPayload = strings.NewReplacer("\n", " ", "\r", " ").Replace(want.payload)
		}
		if rec.RxNs != want.rx || rec.Topic != want.topic || rec.QoS != want.qos || rec.Retained != want.retain ||
			string(rec.Payload) != wantPayload || rec.Line != i+2 {
			t.Errorf("record %d = %+v %q, want %+v", i, rec, rec.Payload, want)
		}
	}
	if err := rr.Next(&rec); err != io.EOF {
		t.Errorf("end: %v", err)
	}
	h, ok := rr.Header()
	if !ok || h.Version != 1 || h.Note != "warehouse robot aisle 3" || h.Created != "2026-12-01T21:00:00Z" {
		t.Errorf("header %+v %v", h, ok)
	}
	if rr.Malformed() != 0 || rr.Records() != len(recSample) {
		t.Errorf("malformed %d records %d", rr.Malformed(), rr.Records())
	}
}

func TestRecordingReaderGoesOn(t *testing.T) {
	in := strings.Join([]string{
		`{"godwit_recording":1,"created":"2026-12-01T21:00:00Z","note":""}`,
		`{"rx_ns":1,"topic":"a","qos":1,"retain":false,"payload":{"v":1}}`,
		`{"rx_ns":2,"topic":"a","qos":1,"retain":false,"payload":{"v":1}`, // truncated
		``,
		`garbage`,
		`{"rx_ns":3,"topic":"a","qos":1,"retain":false,"payload":{"v":1},"payload_b64":"e30="}`,
		`{"rx_ns":4.5,"topic":"a","payload":{}}`,
		`{"rx_ns":5,"topic":7,"payload":{}}`,
		`{"rx_ns":6,"topic":"a","qos":3,"payload":{}}`,
		`{"rx_ns":7,"topic":"a","payload_b64":"!!"}`,
		`{"rx_ns":8,"topic":"a","payload":[1]}`,
		`{"rx_ns":9,"topic":"a\u00e9\ud83d\ude80","payload_b64":"aGk="}` + "\r",
		`{"rx_ns":10,"topic":"a","payload":{"v":1}}`, // no trailing newline
	}, "\n")
	rr := NewRecordReader(strings.NewReader(in), 0)
	var rec Record
	var got []int64
	var badLines []int
	for {
		err := rr.Next(&rec)
		if err == io.EOF {
			break
		}
		var le *LineError
		if errors.As(err, &le) {
			badLines = append(badLines, le.Line)
			continue
		}
		if err != nil {
			t.Fatal(err)
		}
		got = append(got, rec.RxNs)
		if rec.RxNs == 9 && (rec.Topic != "aé🚀" || string(rec.Payload) != "hi") {
			t.Errorf("escapes: topic %q payload %q", rec.Topic, rec.Payload)
		}
	}
	if want := []int64{1, 9, 10}; !equalInts(got, want) {
		t.Errorf("records %v, want %v", got, want)
	}
	if want := []int{3, 5, 6, 7, 8, 9, 10, 11}; !equalInts(badLines, want) {
		t.Errorf("bad lines %v, want %v", badLines, want)
	}
	if rr.Malformed() != 8 {
		t.Errorf("malformed %d", rr.Malformed())
	}
}

func equalInts[T int | int64](a, b []T) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

func TestRecordingLongLinesAndHeader(t *testing.T) {
	big := `{"v":1,"pad":"` + strings.Repeat("x", 300<<10) + `"}` // longer than the bufio buffer
	var buf bytes.Buffer
	rw, _ := NewRecordWriter(&buf, RecordOptions{FlushEvery: -1})
	rw.Write(1, "t", 1, false, []byte(big))
	rw.Write(2, "t", 1, false, []byte(`{}`))
	rw.Close()
	data := buf.Bytes()

	rr := NewRecordReader(bytes.NewReader(data), 0)
	var rec Record
	if err := rr.Next(&rec); err != nil || string(rec.Payload) != big {
		t.Fatalf("long line: %v (%d bytes)", err, len(rec.Payload))
	}
	if err := rr.Next(&rec); err != nil || rec.RxNs != 2 {
		t.Fatalf("after long line: %v", err)
	}

	// A line over the limit is skipped, reported with its number, and the
	// next line is read.
	rr = NewRecordReader(bytes.NewReader(data), 100<<10)
	var le *LineError
	if err := rr.Next(&rec); !errors.As(err, &le) || le.Line != 2 {
		t.Fatalf("over-long line: %v", err)
	}
	if err := rr.Next(&rec); err != nil || rec.RxNs != 2 || rec.Line != 3 {
		t.Fatalf("after over-long line: %v %+v", err, rec)
	}

	// Missing header: reported on line 1, the rest still read.
	rr = NewRecordReader(strings.NewReader(`{"rx_ns":1,"topic":"t","payload":{}}`+"\n"+`{"rx_ns":2,"topic":"t","payload":{}}`), 0)
	if err := rr.Next(&rec); !errors.As(err, &le) || le.Line != 1 {
		t.Fatalf("missing header: %v", err)
	}
	if err := rr.Next(&rec); err != nil || rec.RxNs != 2 {
		t.Fatalf("after missing header: %v", err)
	}

	// An unknown version stops reading.
	rr = NewRecordReader(strings.NewReader(`{"godwit_recording":2}`+"\n"+`{"rx_ns":2,"topic":"t","payload":{}}`), 0)
	if err := rr.Next(&rec); err != ErrRecordingVersion {
		t.Fatalf("version 2: %v", err)
	}
	if err := rr.Next(&rec); err != ErrRecordingVersion {
		t.Fatalf("version 2 is sticky: %v", err)
	}
}

// TestRecordingFlushesRegularly: with FlushEvery set, lines reach the
// underlying writer without Close.
func TestRecordingFlushesRegularly(t *testing.T) {
	var mu syncBuffer
	rw, err := NewRecordWriter(&mu, RecordOptions{FlushEvery: 20 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	defer rw.Close()
	rw.Write(1, "t", 1, false, []byte(`{}`))
	deadline := time.Now().Add(5 * time.Second)
	for time.Now().Before(deadline) {
		if strings.Count(mu.String(), "\n") == 2 {
			return
		}
		time.Sleep(5 * time.Millisecond)
	}
	t.Fatalf("not flushed: %q", mu.String())
}

func TestReplayThroughDecoder(t *testing.T) {
	// The reader hands out the raw payload bytes, so replay decodes them
	// exactly as the live path would.
	var buf bytes.Buffer
	writeSample(t, &buf)
	rr := NewRecordReader(&buf, 0)
	d := newTestDecoder(t)
	var rec Record
	var m Measurement
	if err := rr.Next(&rec); err != nil {
		t.Fatal(err)
	}
	if err := d.Decode(rec.Payload, rec.RxNs, &m); err != nil || len(m.Dets) != 3 {
		t.Fatalf("%v %+v", err, m)
	}
}

func BenchmarkRecordWrite(b *testing.B) {
	rw, _ := NewRecordWriter(io.Discard, RecordOptions{FlushEvery: -1})
	p := []byte(radarJSON)
	b.ReportAllocs()
	for b.Loop() {
		rw.Write(tArrival, "shuttle-07/sensors/front_radar", 1, false, p)
	}
}

func BenchmarkRecordRead(b *testing.B) {
	var buf bytes.Buffer
	rw, _ := NewRecordWriter(&buf, RecordOptions{FlushEvery: -1})
	for range 1000 {
		rw.Write(tArrival, "shuttle-07/sensors/front_radar", 1, false, []byte(radarJSON))
	}
	rw.Close()
	data := buf.Bytes()
	b.ReportAllocs()
	var rec Record
	r := bytes.NewReader(data)
	for b.Loop() {
		r.Reset(data)
		rr := NewRecordReader(r, 0)
		for rr.Next(&rec) == nil {
		}
	}
}
