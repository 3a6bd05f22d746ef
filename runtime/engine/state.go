package engine

import (
	"github.com/godwit-fusion/godwit/filters"
)

// Track status values (DESIGN.md tracks message).
const (
	statusTentative uint8 = iota
	statusConfirmed
	statusCoasting
)

var statusNames = [...]string{"tentative", "confirmed", "coasting"}

// trackRec is everything about a track except its filter.
type trackRec struct {
	id        uint64
	status    uint8
	hist      uint64 // M-of-N window: bit 0 is the newest opportunity, 1 = hit
	nOpp      int    // opportunities in the window so far (≤ N)
	hits      int    // all hits since birth
	misses    int    // consecutive misses where a sensor could see the track
	updatedNs int64
	class     string
}

// state is the part of the engine that out-of-sequence processing must be
// able to restore exactly: the tracks, their filters, the id counter, the
// common track time and the ego estimate. Tracks move only on tracking
// scans and the ego only on scans, each from its own time, so a fast
// odometry stream does not cost a prediction of every track.
type state struct {
	recs    []trackRec
	flt     []filters.Filter // flt[i] belongs to recs[i]; spares follow
	nextID  uint64
	timeNs  int64 // the newest processed scan
	hasTime bool
	trackNs int64 // every track is predicted to this time (tracking scans only)
	egoNs   int64 // the ego estimate's time

	ego     filters.Filter // nil on a fixed platform
	egoInit bool
}

// copyState makes dst an exact copy of src, reusing dst's filters (new
// ones are made by mk only while the pool is still growing).
func copyState(dst, src *state, mk func() (filters.Filter, error)) error {
	dst.recs = append(dst.recs[:0], src.recs...)
	for len(dst.flt) < len(src.recs) {
		f, err := mk()
		if err != nil {
			return err
		}
		dst.flt = append(dst.flt, f)
	}
	for i := range src.recs {
		if err := dst.flt[i].CopyFrom(src.flt[i]); err != nil {
			return err
		}
	}
	dst.nextID, dst.timeNs, dst.hasTime = src.nextID, src.timeNs, src.hasTime
	dst.trackNs, dst.egoNs = src.trackNs, src.egoNs
	dst.egoInit = src.egoInit
	if src.ego != nil && src.egoInit {
		if err := dst.ego.CopyFrom(src.ego); err != nil {
			return err
		}
	}
	return nil
}

// removeTrack deletes track i, keeping the order of the others; its filter
// moves to the spare end of the pool.
func (s *state) removeTrack(i int) {
	n := len(s.recs)
	f := s.flt[i]
	copy(s.recs[i:], s.recs[i+1:])
	s.recs = s.recs[:n-1]
	copy(s.flt[i:n-1], s.flt[i+1:n])
	s.flt[n-1] = f
}

// scan is one stored measurement message with the state snapshot taken
// just before it was processed.
type scan struct {
	tNs    int64 // engine time (sensor time + clock offset)
	sensor int
	seq    uint64
	dets   []storedDet
	snap   state
	fresh  bool // not yet processed: its NIS goes into the health window
}

type storedDet struct {
	z     [3]float64
	hasR  bool
	r     [9]float64 // R, row-major m×m, when hasR
	rs    [9]float64 // its Cholesky factor
	class string
}

// before orders scans by time, then sensor index, then sequence number, so
// that processing order never depends on arrival order.
func (a *scan) before(b *scan) bool {
	if a.tNs != b.tNs {
		return a.tNs < b.tNs
	}
	if a.sensor != b.sensor {
		return a.sensor < b.sensor
	}
	return a.seq < b.seq
}
