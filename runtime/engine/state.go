package engine

import (
	"errors"

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
	posVar    float64 // position variance trace after the track's latest opportunity (covariance_blowup)
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

	// Snapshots only: filter means and square roots, x then S per track,
	// and the ego's (see saveLean).
	xs    []float64
	egoXS []float64
}

func ensureFilters(dst *state, n int, mk func() (filters.Filter, error)) error {
	for len(dst.flt) < n {
		f, err := mk()
		if err != nil {
			return err
		}
		dst.flt = append(dst.flt, f)
	}
	return nil
}

func copyScalars(dst, src *state) {
	dst.nextID, dst.timeNs, dst.hasTime = src.nextID, src.timeNs, src.hasTime
	dst.trackNs, dst.egoNs = src.trackNs, src.egoNs
	dst.egoInit = src.egoInit
}

// saveLean snapshots live into snap keeping only each filter's mean and
// square-root covariance: between scans that is the whole state of a
// square-root Kalman filter or UKF (Prepare is always called afresh), and
// it is 30 floats for CTRV instead of a filter's ~8 KB of workspace. lean
// says whether the track filters qualify; when not (a particle filter,
// whose particles and random source are its state, or a caller's own
// filter) whole filters are copied with CopyFrom. The ego filter, always
// the engine's SR-UKF, is always kept lean.
func saveLean(snap, live *state, lean bool, mk func() (filters.Filter, error), marks *poolMarks) error {
	snap.recs = append(reserve(snap.recs, len(live.recs), &marks.recs), live.recs...)
	if lean {
		n := 0
		for i := range live.recs {
			g := live.flt[i].State()
			n += len(g.X) + len(g.S)
		}
		snap.xs = reserve(snap.xs, n, &marks.xs)
		for i := range live.recs {
			g := live.flt[i].State()
			snap.xs = append(snap.xs, g.X...)
			snap.xs = append(snap.xs, g.S...)
		}
	} else {
		if err := ensureFilters(snap, len(live.recs), mk); err != nil {
			return err
		}
		for i := range live.recs {
			if err := snap.flt[i].CopyFrom(live.flt[i]); err != nil {
				return err
			}
		}
	}
	copyScalars(snap, live)
	snap.egoXS = snap.egoXS[:0]
	if live.ego != nil && live.egoInit {
		g := live.ego.State()
		snap.egoXS = append(append(snap.egoXS, g.X...), g.S...)
	}
	return nil
}

// restoreLean is the inverse of saveLean: live becomes the snapshot again,
// bit for bit (Init copies x and S as they are).
func restoreLean(live, snap *state, lean bool, n int, mk func() (filters.Filter, error)) error {
	// Check everything Init will check before touching live, so that a
	// failure leaves the live state as it was.
	if lean {
		for i := range snap.recs {
			off := i * (n + n*n)
			if err := filters.CheckSqrt(snap.xs[off+n:off+n+n*n], n); err != nil {
				return err
			}
		}
	}
	if live.ego != nil && snap.egoInit {
		if len(snap.egoXS) != 30 {
			return errors.New("engine: ego snapshot has the wrong size")
		}
		if err := filters.CheckSqrt(snap.egoXS[5:], 5); err != nil {
			return err
		}
	}
	if err := ensureFilters(live, len(snap.recs), mk); err != nil {
		return err
	}
	live.recs = append(live.recs[:0], snap.recs...)
	for i := range snap.recs {
		var err error
		if lean {
			off := i * (n + n*n)
			err = live.flt[i].Init(snap.xs[off:off+n], snap.xs[off+n:off+n+n*n])
		} else {
			err = live.flt[i].CopyFrom(snap.flt[i])
		}
		if err != nil {
			return err
		}
	}
	copyScalars(live, snap)
	if live.ego != nil && snap.egoInit {
		if err := live.ego.Init(snap.egoXS[:5], snap.egoXS[5:]); err != nil {
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

// poolMarks are the engine-wide high-water marks of the slices its pooled
// scans and snapshots hold (see reserve).
type poolMarks struct {
	dets, recs, xs int
}

// reserve returns s emptied, with room for n elements. Pooled scans and
// snapshots are reused in turn, and each used to grow its slices to its
// own need: a warm engine kept allocating, now and then, whenever one of
// them first met a larger scan than it had held. Growing straight to the
// engine-wide mark, plus a quarter, lets every pooled object grow about
// once, after which steady state allocates nothing.
func reserve[T any](s []T, n int, mark *int) []T {
	if cap(s) >= n {
		return s[:0]
	}
	*mark = max(*mark, n+n/4)
	return make([]T, 0, *mark)
}
