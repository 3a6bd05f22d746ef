package eval

import (
	"bytes"
	"testing"
)

// FuzzReadTruth: any input gives lines in increasing t_ns with finite
// values, or an error; never a panic. Corpus in testdata/fuzz.
func FuzzReadTruth(f *testing.F) {
	f.Add([]byte(`{"t_ns":1,"objects":[{"id":"p1","pos":[1,2],"vel":[0.5,0]}],"ego":{"pos":[0,0],"yaw":0.25}}`))
	f.Fuzz(func(t *testing.T, b []byte) {
		lines, err := ReadTruth(bytes.NewReader(b))
		if err != nil {
			return
		}
		for i := range lines {
			if i > 0 && lines[i].TNs <= lines[i-1].TNs {
				t.Fatalf("line %d: t_ns not increasing", i)
			}
			for _, o := range lines[i].Objects {
				if !finite(o.Pos[0]) || !finite(o.Pos[1]) || !finite(o.Vel[0]) || !finite(o.Vel[1]) {
					t.Fatalf("non-finite truth %+v", o)
				}
			}
		}
		// Scoring whatever was read must not fail either.
		e, err := New(lines, Options{})
		if err != nil {
			t.Fatal(err)
		}
		for i := range lines {
			if err := e.AddTracks(msg(lines[i].TNs)); err != nil {
				t.Fatal(err)
			}
		}
		_ = e.Summary()
	})
}

// FuzzReadTracks: any input gives messages or an error, never a panic;
// scoring them against a fixed truth never fails.
func FuzzReadTracks(f *testing.F) {
	f.Add([]byte(`{"v":1,"vehicle":"x","seq":1,"t_ns":5,"frame":"site","tracks":[{"id":1,"status":"confirmed","pos":[null,1],"vel":[0,0],"pos_cov":[1,0,0,1],"model":"cv","state":[],"state_cov":[],"updated_ns":5,"hits":1,"misses":0}],"ego":{"pos":[0,0],"yaw":0}}`))
	f.Fuzz(func(t *testing.T, b []byte) {
		msgs, err := ReadTracks(bytes.NewReader(b))
		if err != nil {
			return
		}
		e, err := New([]TruthLine{{TNs: 5, Objects: []TruthObject{obj("a", 1, 1)}, Ego: &TruthEgo{}}}, Options{TruthTolNs: 1 << 62})
		if err != nil {
			t.Fatal(err)
		}
		for i := range msgs {
			if err := e.AddTracks(&msgs[i]); err != nil {
				t.Fatal(err)
			}
		}
		if _, err := e.Summary().JSON(); err != nil {
			t.Fatal(err)
		}
	})
}
