package transport

import (
	"errors"
	"math"
	"strconv"
	"time"
	"unsafe"
)

// Version is the message schema version this package reads and writes.
const Version = 1

// Reason is why a measurement message was rejected. The set is fixed (v1);
// health counters and metrics are keyed by Reason.String().
type Reason uint8

const (
	// ReasonBadJSON: the payload is not syntactically valid JSON (RFC 8259).
	ReasonBadJSON Reason = iota
	// ReasonUnknownSensor: sensor is missing, not a string, or not configured.
	ReasonUnknownSensor
	// ReasonBadDims: z or r has the wrong number of values for the sensor.
	ReasonBadDims
	// ReasonNonFinite: a number is beyond the float64 range.
	ReasonNonFinite
	// ReasonBadCov: r is not symmetric positive definite.
	ReasonBadCov
	// ReasonTimeImplausible: t_ns is not an int64 or is outside the
	// plausible window around the arrival time.
	ReasonTimeImplausible
	// ReasonTooLarge: the payload, the number of dets, a class string or
	// the nesting depth is over its limit.
	ReasonTooLarge
	// ReasonBadVersion: valid JSON but not a v1 measurement: v is missing
	// or not the integer 1, the top level is not an object, or a v1 field
	// is missing or has the wrong JSON type.
	ReasonBadVersion

	// NumReasons sizes arrays of per-reason counters.
	NumReasons = int(ReasonBadVersion) + 1
)

var reasonNames = [NumReasons]string{
	"bad_json", "unknown_sensor", "bad_dims", "non_finite", "bad_cov",
	"time_implausible", "too_large", "bad_version",
}

// String returns the reason code used on the wire and in metrics.
func (r Reason) String() string {
	if int(r) < NumReasons {
		return reasonNames[r]
	}
	return "reason(" + strconv.Itoa(int(r)) + ")"
}

// ParseReason maps a reason code back to its Reason.
func ParseReason(code string) (Reason, bool) {
	for i, n := range reasonNames {
		if n == code {
			return Reason(i), true
		}
	}
	return 0, false
}

// DecodeError is a rejected measurement message. Msg names the field, e.g.
// `dets[3].z[1] is 1e400, beyond the float64 range`.
type DecodeError struct {
	Reason Reason
	Msg    string
}

func (e *DecodeError) Error() string { return e.Reason.String() + ": " + e.Msg }

// ReasonOf returns the reason of a *DecodeError anywhere in err's chain.
func ReasonOf(err error) (Reason, bool) {
	var de *DecodeError
	if errors.As(err, &de) {
		return de.Reason, true
	}
	return 0, false
}

func reject(r Reason, msg string) error { return &DecodeError{Reason: r, Msg: msg} }

// SensorSpec is what the decoder needs to know about a configured sensor.
type SensorSpec struct {
	Name string
	Dim  int // measurement dimension m, 1..MaxMeasDim
}

// Limits bound what the decoder accepts. Zero fields take the defaults below.
type Limits struct {
	MaxPayloadBytes int // default 65536
	MaxDets         int // detections per message, default 1024
	MaxClassBytes   int // length of a class string, default 64
	// A measurement may be at most PastWindow older and FutureWindow newer
	// than its arrival time. A negative window disables that side of the
	// check (e.g. free-running sensor clocks with clock: estimate).
	PastWindow   time.Duration // default 10 s
	FutureWindow time.Duration // default 2 s
}

// Default limits. The time window is wide compared with any lag window
// (hundreds of ms) so that only unit mistakes and broken clocks trip it.
const (
	DefaultMaxPayloadBytes = 64 << 10
	DefaultMaxDets         = 1024
	DefaultMaxClassBytes   = 64
	DefaultPastWindow      = 10 * time.Second
	DefaultFutureWindow    = 2 * time.Second
)

// WithDefaults returns l with zero fields replaced by the defaults.
func (l Limits) WithDefaults() Limits {
	if l.MaxPayloadBytes <= 0 {
		l.MaxPayloadBytes = DefaultMaxPayloadBytes
	}
	if l.MaxDets <= 0 {
		l.MaxDets = DefaultMaxDets
	}
	if l.MaxClassBytes <= 0 {
		l.MaxClassBytes = DefaultMaxClassBytes
	}
	if l.PastWindow == 0 {
		l.PastWindow = DefaultPastWindow
	}
	if l.FutureWindow == 0 {
		l.FutureWindow = DefaultFutureWindow
	}
	return l
}

// maxDecodeDepth is far above a measurement's own depth (object, dets, det,
// z = 4) and leaves room for nested extension fields.
const maxDecodeDepth = 64

// maxInternedClasses bounds the class table so a sender cycling through
// random class strings cannot grow memory; beyond it classes are copied.
const maxInternedClasses = 1024

// Decoder decodes v1 measurement messages. It reuses its scratch space, so
// Decode allocates nothing for accepted messages once warm (a rejected
// message costs its error value and text). A Decoder is not safe for
// concurrent use; give each goroutine its own.
//
// Decoding is two steps over the payload bytes: a strict RFC 8259 syntax
// check (so bad_json means exactly "encoding/json would reject this"), then
// a walk that picks out the v1 fields from the now-trusted bytes, the last
// occurrence of a repeated key winning as in encoding/json.
type Decoder struct {
	limits  Limits
	sensors []SensorSpec
	byName  map[string]int
	classes map[string]string
	syntax  syntaxChecker
	key     []byte // unescaped key, when a key has escapes
	str     []byte // unescaped string value
}

// NewDecoder returns a decoder for the given sensors.
func NewDecoder(sensors []SensorSpec, limits Limits) (*Decoder, error) {
	d := &Decoder{
		limits:  limits.WithDefaults(),
		sensors: append([]SensorSpec(nil), sensors...),
		byName:  make(map[string]int, len(sensors)),
		classes: make(map[string]string),
		key:     make([]byte, 0, 32),
		str:     make([]byte, 0, 64),
	}
	for i, s := range sensors {
		if s.Name == "" {
			return nil, errors.New("transport: sensor " + strconv.Itoa(i) + " has no name")
		}
		if s.Dim < 1 || s.Dim > MaxMeasDim {
			return nil, errors.New("transport: sensor " + s.Name + " has dimension " + strconv.Itoa(s.Dim) +
				", want 1.." + strconv.Itoa(MaxMeasDim))
		}
		if _, dup := d.byName[s.Name]; dup {
			return nil, errors.New("transport: sensor " + s.Name + " is configured twice")
		}
		d.byName[s.Name] = i
	}
	return d, nil
}

// Limits returns the limits in force (defaults filled in).
func (d *Decoder) Limits() Limits { return d.limits }

// Decode decodes payload into dst. arrivalNs is when the message arrived
// (ns since the Unix epoch, the receiver's clock); 0 means unknown and skips
// the time-window check. On error the returned error is a *DecodeError, dst
// holds no detections and must be dropped: a message with any invalid part
// is rejected whole.
func (d *Decoder) Decode(payload []byte, arrivalNs int64, dst *Measurement) error {
	err := d.decode(payload, arrivalNs, dst)
	if err != nil {
		*dst = Measurement{Dets: dst.Dets[:0]}
	}
	return err
}

func (d *Decoder) decode(payload []byte, arrivalNs int64, dst *Measurement) error {
	if len(payload) > d.limits.MaxPayloadBytes {
		return reject(ReasonTooLarge, "payload is "+strconv.Itoa(len(payload))+" bytes, limit "+
			strconv.Itoa(d.limits.MaxPayloadBytes))
	}
	depth, serr, ok := d.syntax.check(payload)
	if !ok {
		return reject(ReasonBadJSON, "not valid JSON at byte "+strconv.Itoa(serr.off)+": "+serr.why)
	}
	if depth > maxDecodeDepth {
		return reject(ReasonTooLarge, "JSON nested "+strconv.Itoa(depth)+" levels deep, limit "+
			strconv.Itoa(maxDecodeDepth))
	}
	root := payload[skipSpace(payload, 0):]
	if root[0] != '{' {
		return reject(ReasonBadVersion, "message is a JSON "+kindOf(root)+", not an object")
	}
	var fv, fsensor, fseq, ftns, fdets []byte
	for _, sp := range d.syntax.top {
		v := payload[sp.v0:sp.v1]
		switch string(d.keyText(payload[sp.k0:sp.k1])) {
		case "v":
			fv = v
		case "sensor":
			fsensor = v
		case "seq":
			fseq = v
		case "t_ns":
			ftns = v
		case "dets":
			fdets = v
		}
	}

	// v
	if fv == nil {
		return reject(ReasonBadVersion, "v is missing")
	}
	if ver, ok := parseInt64(fv); !ok || ver != Version {
		return reject(ReasonBadVersion, "v must be the integer 1")
	}

	// sensor
	if fsensor == nil {
		return reject(ReasonUnknownSensor, "sensor is missing")
	}
	if fsensor[0] != '"' {
		return reject(ReasonUnknownSensor, "sensor is a "+kindOf(fsensor)+", not a string")
	}
	name := d.strText(fsensor)
	idx, known := d.byName[string(name)]
	if !known {
		return reject(ReasonUnknownSensor, "sensor "+strconv.Quote(string(name))+" is not configured")
	}
	spec := &d.sensors[idx]

	// seq
	if fseq == nil {
		return reject(ReasonBadVersion, "seq is missing")
	}
	seq, ok := parseUint64(fseq) // a sequence counter is never negative, not even -0
	if !ok {
		return reject(ReasonBadVersion, "seq must be a non-negative integer")
	}

	// t_ns
	if ftns == nil {
		return reject(ReasonBadVersion, "t_ns is missing")
	}
	tns, ok := parseInt64(ftns)
	if !ok {
		return reject(ReasonTimeImplausible, "t_ns must be an integer number of ns that fits int64")
	}
	if arrivalNs != 0 {
		// Unsigned differences: exact even when t_ns is wildly off.
		if w := d.limits.PastWindow; w >= 0 && tns < arrivalNs {
			if gap := uint64(arrivalNs) - uint64(tns); gap > uint64(w) {
				return reject(ReasonTimeImplausible, "t_ns is "+gapText(gap)+" before arrival, window "+w.String())
			}
		}
		if w := d.limits.FutureWindow; w >= 0 && tns > arrivalNs {
			if gap := uint64(tns) - uint64(arrivalNs); gap > uint64(w) {
				return reject(ReasonTimeImplausible, "t_ns is "+gapText(gap)+" after arrival, window "+w.String())
			}
		}
	}

	// dets
	if fdets == nil {
		return reject(ReasonBadVersion, "dets is missing (send [] for a scan that saw nothing)")
	}
	if fdets[0] != '[' {
		return reject(ReasonBadVersion, "dets is a "+kindOf(fdets)+", not a list")
	}
	out := dst.Dets[:0]
	for i, p := 0, 1; ; i++ {
		p = skipSpace(fdets, p)
		if fdets[p] == ',' {
			p = skipSpace(fdets, p+1)
		}
		if fdets[p] == ']' {
			break
		}
		if i == d.limits.MaxDets {
			return reject(ReasonTooLarge, "dets has "+strconv.Itoa(countElements(fdets))+" entries, limit "+
				strconv.Itoa(d.limits.MaxDets))
		}
		if cap(out) > len(out) {
			out = out[:len(out)+1]
		} else {
			out = append(out, Detection{})
		}
		end, err := d.detection(i, fdets, p, spec, &out[len(out)-1])
		if err != nil {
			dst.Dets = out[:0]
			return err
		}
		p = end
	}
	*dst = Measurement{V: Version, Sensor: spec.Name, SensorIdx: idx, Seq: seq, TNs: tns, Dets: out}
	return nil
}

// detection decodes the detection at dv[at] and returns the end of it.
func (d *Decoder) detection(i int, dv []byte, at int, spec *SensorSpec, det *Detection) (int, error) {
	if dv[at] != '{' {
		return 0, reject(ReasonBadVersion, "dets["+strconv.Itoa(i)+"] is a "+kindOf(dv[at:])+", not an object")
	}
	*det = Detection{Dim: spec.Dim}
	m := spec.Dim
	// z and r are read in place while walking the object, so their numbers
	// are scanned once more rather than twice. A repeated key overrides an
	// earlier one, its error included (last one wins, as in encoding/json).
	var zSeen, rSeen bool
	var zErr, rErr error
	var dclass, dscore []byte
	it := members{b: dv, i: at + 1}
	for {
		k, at, more := it.key()
		if !more {
			break
		}
		switch string(d.keyText(k)) {
		case "z":
			zSeen = true
			it.i, zErr = vector(i, "z", dv, at, m, det.Z[:])
			continue
		case "r":
			rSeen = true
			it.i, rErr = vector(i, "r", dv, at, m*m, det.R[:])
			continue
		}
		end := skipValue(dv, at)
		switch string(d.keyText(k)) {
		case "class":
			dclass = dv[at:end]
		case "score":
			dscore = dv[at:end]
		}
		it.i = end
	}

	if !zSeen {
		return 0, reject(ReasonBadDims, "dets["+strconv.Itoa(i)+"].z is missing")
	}
	if zErr != nil {
		return 0, zErr
	}
	if rSeen {
		if rErr != nil {
			return 0, rErr
		}
		if msg := checkCovariance(det.R[:m*m], m); msg != "" {
			return 0, reject(ReasonBadCov, "dets["+strconv.Itoa(i)+"].r "+msg)
		}
		det.HasR = true
	}
	if dclass != nil {
		if dclass[0] != '"' {
			return 0, reject(ReasonBadVersion, "dets["+strconv.Itoa(i)+"].class is a "+kindOf(dclass)+", not a string")
		}
		c := d.strText(dclass)
		if len(c) > d.limits.MaxClassBytes {
			return 0, reject(ReasonTooLarge, "dets["+strconv.Itoa(i)+"].class is "+strconv.Itoa(len(c))+
				" bytes, limit "+strconv.Itoa(d.limits.MaxClassBytes))
		}
		det.Class = d.intern(c)
	}
	if dscore != nil {
		s, r, msg := number(dscore)
		if msg != "" {
			return 0, reject(r, "dets["+strconv.Itoa(i)+"].score "+msg)
		}
		det.Score, det.HasScore = s, true
	}
	return it.i, nil
}

// vector reads the value at b[at], which must be a JSON list of exactly n
// finite numbers, into out[:n]. It returns the end of the value whatever
// the outcome, so the caller can go on walking the object.
func vector(i int, field string, b []byte, at, n int, out []float64) (int, error) {
	if b[at] != '[' {
		return skipValue(b, at), reject(ReasonBadVersion, "dets["+strconv.Itoa(i)+"]."+field+" is a "+
			kindOf(b[at:])+", not a list")
	}
	var err error
	p := at + 1
	j := 0
	for ; ; j++ {
		p = skipSpace(b, p)
		if b[p] == ',' {
			p = skipSpace(b, p+1)
		}
		if b[p] == ']' {
			p++
			break
		}
		if c := b[p]; j < n && err == nil && (c == '-' || c >= '0' && c <= '9') {
			if f, end, ok := exactFloatAt(b, p); ok {
				out[j] = f
				p = end
				continue
			}
			end, _ := scanNumber(b, p)
			f, r, msg := number(b[p:end])
			if msg != "" {
				err = reject(r, "dets["+strconv.Itoa(i)+"]."+field+"["+strconv.Itoa(j)+"] "+msg)
			}
			out[j] = f
			p = end
			continue
		}
		end := skipValue(b, p)
		if j < n && err == nil {
			_, r, msg := number(b[p:end])
			err = reject(r, "dets["+strconv.Itoa(i)+"]."+field+"["+strconv.Itoa(j)+"] "+msg)
		}
		p = end
	}
	if j != n {
		return p, reject(ReasonBadDims, "dets["+strconv.Itoa(i)+"]."+field+" has "+strconv.Itoa(j)+
			" values, the sensor needs "+strconv.Itoa(n))
	}
	return p, err
}

// number reads a finite float64 from a number literal. The syntax check has
// ruled out NaN/Inf literals, so a non-finite result means overflow.
// strconv.ParseFloat rounds correctly, as encoding/json does (fastjson's
// Float64 does not always: 9.62964972193618e-35 came back one ulp off).
func number(v []byte) (float64, Reason, string) {
	if c := v[0]; c != '-' && (c < '0' || c > '9') {
		return 0, ReasonBadVersion, "is a " + kindOf(v) + ", not a number"
	}
	if f, ok := exactFloat(v); ok {
		return f, 0, ""
	}
	// The string aliases v only for the duration of the call.
	f, err := strconv.ParseFloat(unsafe.String(unsafe.SliceData(v), len(v)), 64)
	if err != nil || math.IsInf(f, 0) {
		return 0, ReasonNonFinite, "is beyond the float64 range"
	}
	return f, 0, ""
}

// pow10 holds the powers of ten that float64 represents exactly.
var pow10 = [...]float64{1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10,
	1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22}

// exactFloat converts a valid JSON number whose decimal significand fits in
// 53 bits and whose decimal exponent is within ±22: then the significand
// and 10^|e| are exact doubles and one IEEE multiply or divide gives the
// correctly rounded result (Clinger 1990, "How to read floating point
// numbers accurately", the fast path). Sensor data nearly always takes it;
// anything else reports false and goes to strconv.
func exactFloat(v []byte) (float64, bool) {
	f, end, ok := exactFloatAt(v, 0)
	return f, ok && end == len(v)
}

// exactFloatAt is exactFloat for the valid number starting at b[i]; it also
// returns where the number ends.
func exactFloatAt(b []byte, i int) (float64, int, bool) {
	neg := false
	if b[i] == '-' {
		neg = true
		i++
	}
	var mant uint64
	digits, exp := 0, 0
	for ; i < len(b) && b[i] >= '0' && b[i] <= '9'; i++ {
		if mant == 0 && b[i] == '0' {
			continue
		}
		mant = mant*10 + uint64(b[i]-'0')
		if digits++; digits > 15 {
			return 0, 0, false
		}
	}
	if i < len(b) && b[i] == '.' {
		for i++; i < len(b) && b[i] >= '0' && b[i] <= '9'; i++ {
			exp--
			if mant == 0 && b[i] == '0' {
				continue
			}
			mant = mant*10 + uint64(b[i]-'0')
			if digits++; digits > 15 {
				return 0, 0, false
			}
		}
	}
	if i < len(b) && (b[i] == 'e' || b[i] == 'E') {
		i++
		eneg := false
		if b[i] == '+' || b[i] == '-' {
			eneg = b[i] == '-'
			i++
		}
		e := 0
		for ; i < len(b) && b[i] >= '0' && b[i] <= '9'; i++ {
			if e = e*10 + int(b[i]-'0'); e > 1000 {
				return 0, 0, false
			}
		}
		if eneg {
			e = -e
		}
		exp += e
	}
	// 15 digits keep mant below 2^53 (10^15 < 2^53 ≈ 9.007e15).
	f := float64(mant)
	switch {
	case mant == 0:
	case exp < -22 || exp > 22:
		return 0, 0, false
	case exp < 0:
		f /= pow10[-exp]
	default:
		f *= pow10[exp]
	}
	if neg {
		f = -f
	}
	return f, i, true
}

// kindOf names the JSON type of a valid value, for error messages.
func kindOf(v []byte) string {
	switch v[0] {
	case '{':
		return "object"
	case '[':
		return "array"
	case '"':
		return "string"
	case 't', 'f':
		return "bool"
	case 'n':
		return "null"
	}
	return "number"
}

// keyText returns a raw key (quotes included) unescaped.
func (d *Decoder) keyText(raw []byte) []byte {
	if !hasEscape(raw) {
		return raw[1 : len(raw)-1]
	}
	d.key = unquote(d.key[:0], raw)
	return d.key
}

// strText returns a raw string value unescaped; valid until the next call.
func (d *Decoder) strText(raw []byte) []byte {
	if !hasEscape(raw) {
		return raw[1 : len(raw)-1]
	}
	d.str = unquote(d.str[:0], raw)
	return d.str
}

// members walks the members of a syntactically valid object; i starts
// after the '{'.
type members struct {
	b []byte
	i int
}

// key returns the next raw key and where its value starts; the caller moves
// it.i past the value.
func (it *members) key() (key []byte, at int, ok bool) {
	b, i := it.b, skipSpace(it.b, it.i)
	if b[i] == ',' {
		i = skipSpace(b, i+1)
	}
	if b[i] == '}' {
		it.i = i + 1 // the end of the object
		return nil, 0, false
	}
	kend := skipString(b, i)
	return b[i:kend], skipSpace(b, skipSpace(b, kend)+1), true // past ':'
}

// elements walks the elements of a syntactically valid array; i starts
// after the '['.
type elements struct {
	b []byte
	i int
}

func (it *elements) next() (val []byte, ok bool) {
	b, i := it.b, skipSpace(it.b, it.i)
	if b[i] == ',' {
		i = skipSpace(b, i+1)
	}
	if b[i] == ']' {
		return nil, false
	}
	vend := skipValue(b, i)
	it.i = vend
	return b[i:vend], true
}

func countElements(arr []byte) int {
	n := 0
	for it := (elements{b: arr, i: 1}); ; n++ {
		if _, more := it.next(); !more {
			return n
		}
	}
}

func parseUint64(b []byte) (uint64, bool) {
	if len(b) == 0 {
		return 0, false
	}
	var u uint64
	for _, c := range b {
		if c < '0' || c > '9' {
			return 0, false
		}
		if u > (math.MaxUint64-uint64(c-'0'))/10 {
			return 0, false
		}
		u = u*10 + uint64(c-'0')
	}
	return u, true
}

func parseInt64(b []byte) (int64, bool) {
	neg := len(b) > 0 && b[0] == '-'
	if neg {
		b = b[1:]
	}
	u, ok := parseUint64(b)
	if !ok {
		return 0, false
	}
	if neg {
		if u > 1<<63 {
			return 0, false
		}
		return int64(-u), true // -(1<<63) wraps to MinInt64 exactly
	}
	if u > math.MaxInt64 {
		return 0, false
	}
	return int64(u), true
}

func (d *Decoder) intern(b []byte) string {
	if len(b) == 0 {
		return ""
	}
	if s, ok := d.classes[string(b)]; ok {
		return s
	}
	s := string(b)
	if len(d.classes) < maxInternedClasses {
		d.classes[s] = s
	}
	return s
}

// covSymTol is the relative tolerance for r's symmetry; senders print
// rounded numbers (common practice; check-v1 uses the same 1e-9).
const covSymTol = 1e-9

// covPivotTol rejects r whose Cholesky pivots collapse relative to the
// diagonal: such an r is singular in float64 and its inverse (in the NIS and
// the gain) is meaningless. Relative pivot thresholds are common practice.
const covPivotTol = 1e-12

// checkCovariance tests that the row-major m×m matrix r is symmetric positive
// definite by attempting its Cholesky factorisation r = L·Lᵀ (Golub & Van
// Loan, Matrix Computations, Cholesky algorithm). It returns "" when r is
// SPD, else why not.
func checkCovariance(r []float64, m int) string {
	for i := range m {
		for j := i + 1; j < m; j++ {
			a, b := r[i*m+j], r[j*m+i]
			if math.Abs(a-b) > covSymTol*math.Max(1, math.Max(math.Abs(a), math.Abs(b))) {
				return "is not symmetric: [" + strconv.Itoa(i) + "," + strconv.Itoa(j) + "] != [" +
					strconv.Itoa(j) + "," + strconv.Itoa(i) + "]"
			}
		}
	}
	var l [MaxMeasDim * MaxMeasDim]float64
	for j := range m {
		s := r[j*m+j]
		for k := range j {
			s -= l[j*m+k] * l[j*m+k]
		}
		if !(s > covPivotTol*r[j*m+j]) || !(r[j*m+j] > 0) {
			return "is not positive definite (Cholesky pivot " + strconv.Itoa(j) + " is not positive)"
		}
		l[j*m+j] = math.Sqrt(s)
		for i := j + 1; i < m; i++ {
			t := r[i*m+j]
			for k := range j {
				t -= l[i*m+k] * l[j*m+k]
			}
			l[i*m+j] = t / l[j*m+j]
		}
	}
	return ""
}

func gapText(ns uint64) string {
	if ns > math.MaxInt64 {
		return "more than 292 years"
	}
	return time.Duration(ns).String()
}
