package transport

import (
	"bytes"
	"encoding/json"
	"errors"
	"io"
	"math"
	"strconv"
	"strings"
	"testing"
	"unicode/utf8"

	"pgregory.net/rapid"
)

// decodeSeeds are the in-code seeds; more live in testdata/fuzz/FuzzDecode.
var decodeSeeds = []string{
	radarJSON,
	`{"v":1,"sensor":"gnss","seq":0,"t_ns":1764626400123456789,"dets":[{"z":[52.1,-1.3]}]}`,
	`{"v":1,"sensor":"front_camera","seq":3,"t_ns":1764626400123456789,"dets":[{"z":[320.5,12],"r":[4,0,0,0.25]}]}`,
	`{"v":1,"sensor":"front_radar","seq":1,"t_ns":1764626400123456789,"dets":[{"z":[1e400,0,0]}]}`,
	`{"v":1,"sensor":"front_radar","seq":1,"t_ns":1764626400123456789,"dets":[{"z":[NaN,0,0]}]}`,
	`{"\u0076":1,"sensor":"gnss","seq":1,"t_ns":1764626400123456789,"dets":[],"x":{"y":[null,true,false,"\ud800"]}}`,
	`{"v":1,"sensor":"gnss","seq":18446744073709551615,"t_ns":-0,"dets":[]}`,
	"{\"v\":1,\"sensor\":\"g\xffnss\"}",
	`[]`, `"x"`, `1.5e-7`, ` {} `, `{"a":"\q"}`, `{"a":01}`, `{"a":1.}`, `{"a":-}`, `{"a":.5}`,
}

// FuzzDecode uses encoding/json as the reference: a payload is bad_json
// exactly when json.Valid rejects it, and every number the decoder accepts
// equals strconv.ParseFloat of its text, which is what encoding/json uses.
func FuzzDecode(f *testing.F) {
	for _, s := range decodeSeeds {
		f.Add([]byte(s))
	}
	d, err := NewDecoder(testSensors, Limits{PastWindow: -1, FutureWindow: -1})
	if err != nil {
		f.Fatal(err)
	}
	f.Fuzz(func(t *testing.T, in []byte) {
		var m Measurement
		err := d.Decode(in, tArrival, &m)
		r, isDecodeErr := ReasonOf(err)
		if err != nil && !isDecodeErr {
			t.Fatalf("error is not a *DecodeError: %v", err)
		}
		if len(in) <= DefaultMaxPayloadBytes {
			valid := json.Valid(in)
			if valid == (err != nil && r == ReasonBadJSON) {
				t.Fatalf("json.Valid %v but err %v for %q", valid, err, in)
			}
			checkTopSpans(t, d, in, valid)
		}
		if err != nil {
			if len(m.Dets) != 0 || m.Sensor != "" {
				t.Fatalf("rejected message left %+v", m)
			}
			return
		}
		// Accepted: compare with encoding/json's reading, numbers as text.
		dec := json.NewDecoder(bytes.NewReader(in))
		dec.UseNumber()
		var ref map[string]any
		if err := dec.Decode(&ref); err != nil {
			t.Fatalf("accepted %q, encoding/json: %v", in, err)
		}
		if num(t, ref["v"]) != 1 || ref["sensor"] != m.Sensor {
			t.Fatalf("header v=%v sensor=%v vs %+v", ref["v"], ref["sensor"], m)
		}
		if s, _ := strconv.ParseUint(string(ref["seq"].(json.Number)), 10, 64); s != m.Seq {
			t.Fatalf("seq %v vs %d", ref["seq"], m.Seq)
		}
		if tn, _ := strconv.ParseInt(string(ref["t_ns"].(json.Number)), 10, 64); tn != m.TNs {
			t.Fatalf("t_ns %v vs %d", ref["t_ns"], m.TNs)
		}
		dets := ref["dets"].([]any)
		if len(dets) != len(m.Dets) {
			t.Fatalf("%d dets vs %d", len(dets), len(m.Dets))
		}
		for i, dv := range dets {
			o := dv.(map[string]any)
			got := m.Dets[i]
			for j, z := range o["z"].([]any) {
				if num(t, z) != got.Z[j] {
					t.Fatalf("dets[%d].z[%d]: %v vs %v", i, j, z, got.Z[j])
				}
			}
			if rr, ok := o["r"].([]any); ok != got.HasR {
				t.Fatalf("dets[%d] HasR %v", i, got.HasR)
			} else if ok {
				for j, v := range rr {
					if num(t, v) != got.R[j] {
						t.Fatalf("dets[%d].r[%d]: %v vs %v", i, j, v, got.R[j])
					}
				}
			}
			if s, ok := o["score"]; ok != got.HasScore || ok && num(t, s) != got.Score {
				t.Fatalf("dets[%d].score %v vs %v", i, s, got.Score)
			}
			if c, _ := o["class"].(string); utf8.ValidString(got.Class) && c != got.Class { // encoding/json turns invalid UTF-8 into U+FFFD
				t.Fatalf("dets[%d].class %q vs %q", i, c, got.Class)
			}
		}
	})
}

// checkTopSpans compares the member spans the syntax check records for a
// top-level object with encoding/json's raw members (last key wins).
func checkTopSpans(t *testing.T, d *Decoder, in []byte, valid bool) {
	t.Helper()
	var ref map[string]json.RawMessage
	if !valid || json.Unmarshal(in, &ref) != nil {
		return
	}
	got := map[string][]byte{}
	for _, sp := range d.syntax.top {
		k := in[sp.k0:sp.k1]
		if bytes.IndexByte(k, '\\') >= 0 || !utf8.Valid(k) {
			return // encoding/json rewrites such keys; not comparable byte for byte
		}
		got[string(k[1:len(k)-1])] = in[sp.v0:sp.v1]
	}
	if len(got) != len(ref) {
		t.Fatalf("%d top-level members, encoding/json %d: %q", len(got), len(ref), in)
	}
	for k, v := range ref {
		if !bytes.Equal(got[k], v) {
			t.Fatalf("member %q: %q, encoding/json %q", k, got[k], v)
		}
	}
}

func num(t *testing.T, v any) float64 {
	t.Helper()
	n, ok := v.(json.Number)
	if !ok {
		t.Fatalf("%v (%T) is not a number", v, v)
	}
	f, err := strconv.ParseFloat(string(n), 64)
	if err != nil || math.IsInf(f, 0) {
		t.Fatalf("accepted out-of-range number %s", n)
	}
	return f
}

// FuzzRecordReader feeds arbitrary bytes to the reader: it must never panic,
// return only line errors or io.EOF, number lines correctly, and hand out
// payloads that encoding/json agrees with.
func FuzzRecordReader(f *testing.F) {
	var buf bytes.Buffer
	rw, _ := NewRecordWriter(&buf, RecordOptions{Note: "seed", FlushEvery: -1})
	rw.Write(tArrival, "shuttle-07/sensors/front_radar", 1, false, []byte(radarJSON))
	rw.Write(tArrival, "shuttle-07/status", 1, true, []byte("online"))
	rw.Close()
	f.Add(buf.Bytes())
	f.Add([]byte("{\"godwit_recording\":1}\n{\"rx_ns\":1,\"topic\":\"a\\u00e9\",\"payload\":{}}\r\n\n{\"rx_ns\":2}\n"))
	f.Add([]byte("not a header\n{\"rx_ns\":1,\"topic\":\"t\",\"payload_b64\":\"AA==\"}"))
	f.Fuzz(func(t *testing.T, in []byte) {
		rr := NewRecordReader(bytes.NewReader(in), 4096)
		lines := bytes.Split(in, []byte("\n"))
		if len(lines) > 0 && len(lines[len(lines)-1]) == 0 {
			lines = lines[:len(lines)-1]
		}
		var rec Record
		last := 0
		for {
			err := rr.Next(&rec)
			if err == io.EOF {
				break
			}
			if err == ErrRecordingVersion {
				return
			}
			var le *LineError
			line := rec.Line
			if errors.As(err, &le) {
				line = le.Line
			} else if err != nil {
				t.Fatalf("unexpected error %v", err)
			}
			if line <= last || line > len(lines) {
				t.Fatalf("line %d after %d (of %d)", line, last, len(lines))
			}
			last = line
			if err != nil {
				continue
			}
			raw := bytes.TrimSuffix(lines[line-1], []byte("\r"))
			var ref map[string]json.RawMessage
			if json.Unmarshal(raw, &ref) != nil {
				t.Fatalf("accepted line %d that encoding/json rejects: %q", line, raw)
			}
			if p, ok := ref["payload"]; ok && !bytes.Equal(bytes.TrimSpace(p), rec.Payload) {
				t.Fatalf("payload %q vs %q", rec.Payload, p)
			}
			var topic string
			if json.Unmarshal(ref["topic"], &topic) == nil && utf8.Valid(ref["topic"]) && !strings.Contains(string(ref["topic"]), `\u`) && topic != rec.Topic {
				t.Fatalf("topic %q vs %q", rec.Topic, topic)
			}
		}
		if rr.Malformed()+rr.Records() > len(lines) {
			t.Fatalf("%d malformed + %d records > %d lines", rr.Malformed(), rr.Records(), len(lines))
		}
	})
}

// TestMeasurementRoundTripProperty: random measurements → AppendMeasurement
// → both our decoder and encoding/json → the same values (floats exact).
func TestMeasurementRoundTripProperty(t *testing.T) {
	d := newTestDecoder(t)
	rapid.Check(t, func(t *rapid.T) {
		spec := testSensors[rapid.IntRange(0, len(testSensors)-1).Draw(t, "sensor")]
		m := Measurement{V: 1, Sensor: spec.Name, Seq: rapid.Uint64().Draw(t, "seq"),
			TNs: tArrival - rapid.Int64Range(0, int64(DefaultPastWindow)).Draw(t, "age")}
		finite := rapid.Float64().Filter(func(f float64) bool { return !math.IsNaN(f) && !math.IsInf(f, 0) })
		for range rapid.IntRange(0, 5).Draw(t, "n") {
			det := Detection{Dim: spec.Dim}
			for j := range spec.Dim {
				det.Z[j] = finite.Draw(t, "z")
			}
			if rapid.Bool().Draw(t, "hasR") {
				det.HasR = true
				for j := range spec.Dim { // diagonal: SPD when positive
					det.R[j*spec.Dim+j] = rapid.Float64Range(1e-6, 1e6).Draw(t, "var")
				}
			}
			if rapid.Bool().Draw(t, "hasScore") {
				det.Score, det.HasScore = rapid.Float64Range(0, 1).Draw(t, "score"), true
			}
			det.Class = rapid.SampledFrom([]string{"", "cart", "pedestrian", "pallet\t\"jack\""}).Draw(t, "class")
			m.Dets = append(m.Dets, det)
		}
		b, err := AppendMeasurement(nil, &m)
		if err != nil {
			t.Fatal(err)
		}
		var got Measurement
		if err := d.Decode(b, tArrival, &got); err != nil {
			t.Fatalf("%v: %s", err, b)
		}
		got.SensorIdx = 0
		if m.Dets == nil {
			got.Dets = nil
		}
		if !measEqual(&got, &m) {
			t.Fatalf("decoded %+v\nwant %+v\n%s", got, m, b)
		}
		var ref struct {
			Seq  uint64 `json:"seq"`
			Dets []struct {
				Z     []float64 `json:"z"`
				Class string    `json:"class"`
			} `json:"dets"`
		}
		if err := json.Unmarshal(b, &ref); err != nil {
			t.Fatal(err)
		}
		for i, rd := range ref.Dets {
			for j, z := range rd.Z {
				if z != m.Dets[i].Z[j] {
					t.Fatalf("encoding/json reads z %v, want %v", z, m.Dets[i].Z[j])
				}
			}
			if rd.Class != m.Dets[i].Class {
				t.Fatalf("class %q", rd.Class)
			}
		}
	})
}

func measEqual(a, b *Measurement) bool {
	if a.V != b.V || a.Sensor != b.Sensor || a.Seq != b.Seq || a.TNs != b.TNs || len(a.Dets) != len(b.Dets) {
		return false
	}
	for i := range a.Dets {
		x, y := a.Dets[i], b.Dets[i]
		if x.Dim != y.Dim || x.HasR != y.HasR || x.Class != y.Class || x.HasScore != y.HasScore || x.Score != y.Score {
			return false
		}
		for j := range x.Dim {
			if x.Z[j] != y.Z[j] {
				return false
			}
		}
		if x.HasR && x.R != y.R {
			return false
		}
	}
	return true
}
