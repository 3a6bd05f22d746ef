package fleet

import (
	"errors"
	"reflect"
	"testing"
)

// FuzzHandle feeds arbitrary payloads on a health or status topic. Whatever
// arrives, Handle must not panic; a refusal must be a counted *RejectError
// that leaves the vehicle exactly as it was. Seeds: testdata/fuzz/FuzzHandle.
func FuzzHandle(f *testing.F) {
	f.Add([]byte(designExample), false, false)
	f.Add([]byte(`{"v":1,"vehicle":"v","t_ns":1,"state":"ok","alerts":[]}`), true, false)
	f.Add([]byte("offline"), false, true)
	f.Add([]byte(`{"v":1,"vehicle":"v","t_ns":1,"state":"ok","alerts":[{"code":"x","since_ns":1e3}]}`), false, false)
	f.Fuzz(func(t *testing.T, payload []byte, retained, status bool) {
		s := NewStore(StoreConfig{})
		good := []byte(`{"v":1,"vehicle":"v","t_ns":5,"state":"degraded","alerts":[{"code":"overrun","since_ns":4}],"sensors":{"a":{"rate_hz":1}}}`)
		if err := s.Handle("godwit/v/health", good, false, t0); err != nil {
			t.Fatal(err)
		}
		before, _ := s.Vehicle("v")
		topic := "godwit/v/health"
		if status {
			topic = "godwit/v/status"
		}
		err := s.Handle(topic, payload, retained, t0+1)
		if err == nil {
			// Accepted: the view must still be well formed.
			v, _ := s.Vehicle("v")
			if v.State == "" || v.Alerts == nil || v.Sensors == nil {
				t.Fatalf("accepted message left a malformed view %+v", v)
			}
			return
		}
		var re *RejectError
		if !errors.As(err, &re) {
			t.Fatalf("error %v is not a *RejectError", err)
		}
		if s.Counters().Rejected[re.Reason] != 1 {
			t.Fatalf("reason %s not counted", re.Reason)
		}
		after, _ := s.Vehicle("v")
		after.BadMessages = before.BadMessages
		if !reflect.DeepEqual(before, after) {
			t.Fatalf("refused message changed the vehicle:\n%+v\n%+v", before, after)
		}
	})
}
