package transport

import (
	"bufio"
	"bytes"
	"encoding/base64"
	"errors"
	"io"
	"os"
	"strconv"
	"sync"
	"time"
	"unicode/utf16"
	"unicode/utf8"
)

// RecordingVersion is the value of godwit_recording in a recording's header.
const RecordingVersion = 1

// RecordOptions tune a RecordWriter.
type RecordOptions struct {
	Note    string    // free text for the header
	Created time.Time // header time; zero means time.Now()
	// FlushEvery bounds how long a message may sit in the buffer: a recording
	// cut short by a crash loses at most this much. Default 1 s; negative
	// flushes only when the buffer fills and on Close.
	FlushEvery time.Duration
	BufBytes   int // write buffer, default 64 KiB
}

// RecordWriter writes a recording (DESIGN.md "Recording file", JSON Lines).
// It is safe for concurrent use.
type RecordWriter struct {
	mu     sync.Mutex
	bw     *bufio.Writer
	file   *os.File // set when the writer owns the file
	line   []byte
	syntax syntaxChecker
	err    error // first write error; sticky
	n      uint64

	stop chan struct{}
	wg   sync.WaitGroup
}

// CreateRecording creates (truncates) the file at path and writes the header.
// Close closes the file.
func CreateRecording(path string, opts RecordOptions) (*RecordWriter, error) {
	f, err := os.Create(path)
	if err != nil {
		return nil, err
	}
	rw, err := NewRecordWriter(f, opts)
	if err != nil {
		f.Close()
		return nil, err
	}
	rw.file = f
	return rw, nil
}

// NewRecordWriter writes the header line to w. Close flushes but does not
// close w.
func NewRecordWriter(w io.Writer, opts RecordOptions) (*RecordWriter, error) {
	if opts.BufBytes <= 0 {
		opts.BufBytes = 64 << 10
	}
	if opts.FlushEvery == 0 {
		opts.FlushEvery = time.Second
	}
	created := opts.Created
	if created.IsZero() {
		created = time.Now()
	}
	rw := &RecordWriter{bw: bufio.NewWriterSize(w, opts.BufBytes), line: make([]byte, 0, 4096)}
	jw := jsonWriter{b: rw.line[:0]}
	jw.raw(`{"godwit_recording":1,"created":`)
	jw.str(created.UTC().Format(time.RFC3339Nano))
	jw.raw(`,"note":`)
	jw.str(opts.Note)
	jw.raw("}\n")
	rw.line = jw.b
	if _, err := rw.bw.Write(rw.line); err != nil {
		return nil, err
	}
	if err := rw.bw.Flush(); err != nil {
		return nil, err
	}
	if opts.FlushEvery > 0 {
		rw.stop = make(chan struct{})
		rw.wg.Add(1)
		go rw.flushLoop(rw.stop, opts.FlushEvery)
	}
	return rw, nil
}

func (rw *RecordWriter) flushLoop(stop <-chan struct{}, every time.Duration) {
	defer rw.wg.Done()
	t := time.NewTicker(every)
	defer t.Stop()
	for {
		select {
		case <-stop:
			return
		case <-t.C:
			rw.Flush()
		}
	}
}

// Write appends one received message. A payload that is a JSON object is
// stored as is under "payload" (line breaks, which can only be whitespace
// there, become spaces so the length is unchanged); anything else is stored
// as "payload_b64". The first write error is returned by every later call.
func (rw *RecordWriter) Write(rxNs int64, topic string, qos byte, retained bool, payload []byte) error {
	rw.mu.Lock()
	defer rw.mu.Unlock()
	if rw.err != nil {
		return rw.err
	}
	jw := jsonWriter{b: rw.line[:0]}
	jw.raw(`{"rx_ns":`)
	jw.int(rxNs)
	jw.raw(`,"topic":`)
	jw.str(topic)
	jw.raw(`,"qos":`)
	jw.uint(uint64(qos))
	jw.raw(`,"retain":`)
	jw.bool(retained)
	if rw.isObject(payload) {
		jw.raw(`,"payload":`)
		start := len(jw.b)
		jw.b = append(jw.b, payload...)
		for i := start; i < len(jw.b); i++ {
			if jw.b[i] == '\n' || jw.b[i] == '\r' {
				jw.b[i] = ' '
			}
		}
	} else {
		jw.raw(`,"payload_b64":"`)
		jw.b = base64.StdEncoding.AppendEncode(jw.b, payload)
		jw.raw(`"`)
	}
	jw.raw("}\n")
	rw.line = jw.b
	if _, err := rw.bw.Write(rw.line); err != nil {
		rw.err = err
		return err
	}
	rw.n++
	return nil
}

func (rw *RecordWriter) isObject(p []byte) bool {
	i := skipSpace(p, 0)
	if i >= len(p) || p[i] != '{' {
		return false
	}
	_, _, ok := rw.syntax.check(p)
	return ok
}

// Count is the number of messages written.
func (rw *RecordWriter) Count() uint64 {
	rw.mu.Lock()
	defer rw.mu.Unlock()
	return rw.n
}

// Flush writes buffered lines to the underlying writer.
func (rw *RecordWriter) Flush() error {
	rw.mu.Lock()
	defer rw.mu.Unlock()
	if rw.err != nil {
		return rw.err
	}
	if err := rw.bw.Flush(); err != nil {
		rw.err = err
	}
	return rw.err
}

// Close stops the periodic flush, flushes, and closes the file if the writer
// created it. It is safe to call more than once.
func (rw *RecordWriter) Close() error {
	rw.mu.Lock()
	stop := rw.stop
	rw.stop = nil
	rw.mu.Unlock()
	if stop != nil {
		close(stop)
		rw.wg.Wait()
	}
	err := rw.Flush()
	rw.mu.Lock()
	defer rw.mu.Unlock()
	if rw.file != nil {
		if cerr := rw.file.Close(); err == nil {
			err = cerr
		}
		rw.file = nil
	}
	return err
}

// RecordingHeader is the first line of a recording.
type RecordingHeader struct {
	Version int
	Created string // RFC 3339 as written
	Note    string
}

// Record is one received message read back from a recording. Payload is
// exactly the bytes to give the Decoder; it is valid until the next Next.
type Record struct {
	Line     int
	RxNs     int64
	Topic    string
	QoS      byte
	Retained bool
	Payload  []byte
}

// LineError is a malformed line in a recording. The reader counts it and
// goes on with the next line.
type LineError struct {
	Line int
	Msg  string
}

func (e *LineError) Error() string { return "line " + strconv.Itoa(e.Line) + ": " + e.Msg }

// ErrRecordingVersion means the header names a recording version this
// reader does not know; reading stops.
var ErrRecordingVersion = errors.New("transport: unsupported recording version")

// DefaultMaxLineBytes bounds one line of a recording.
const DefaultMaxLineBytes = 16 << 20

// maxInternedTopics bounds the topic table (a recording has few topics).
const maxInternedTopics = 4096

// RecordReader streams a recording line by line; it never loads the whole
// file. It is not safe for concurrent use.
type RecordReader struct {
	br        *bufio.Reader
	maxLine   int
	line      int
	long      []byte
	scratch   []byte
	payload   []byte
	syntax    syntaxChecker
	topics    map[string]string
	header    RecordingHeader
	hasHeader bool
	malformed int
	records   int
	err       error // sticky fatal error
}

// NewRecordReader reads from r. maxLine bounds a line (0: DefaultMaxLineBytes);
// a longer line is skipped and reported.
func NewRecordReader(r io.Reader, maxLine int) *RecordReader {
	if maxLine <= 0 {
		maxLine = DefaultMaxLineBytes
	}
	return &RecordReader{br: bufio.NewReaderSize(r, 64<<10), maxLine: maxLine, topics: make(map[string]string)}
}

// Header returns the recording header once line 1 has been read by Next.
func (rr *RecordReader) Header() (RecordingHeader, bool) { return rr.header, rr.hasHeader }

// Malformed is the number of malformed lines met so far.
func (rr *RecordReader) Malformed() int { return rr.malformed }

// Records is the number of records returned so far.
func (rr *RecordReader) Records() int { return rr.records }

// Next reads the next record into rec. It returns nil, a *LineError for a
// malformed line (counted; call Next again), io.EOF at the end, or another
// error when reading cannot go on.
func (rr *RecordReader) Next(rec *Record) error {
	for {
		if rr.err != nil {
			return rr.err
		}
		b, tooLong, err := rr.readLine()
		if err != nil {
			rr.err = err
			return err
		}
		if tooLong {
			rr.malformed++
			return &LineError{Line: rr.line, Msg: "longer than " + strconv.Itoa(rr.maxLine) + " bytes"}
		}
		if len(bytes.TrimSpace(b)) == 0 {
			continue // blank lines carry nothing (a trailing newline, an editor)
		}
		if rr.line == 1 {
			if err := rr.parseHeader(b); err != nil {
				if err == ErrRecordingVersion {
					rr.err = err
					return err
				}
				rr.malformed++
				return err
			}
			continue
		}
		if msg := rr.parseRecord(b, rec); msg != "" {
			rr.malformed++
			return &LineError{Line: rr.line, Msg: msg}
		}
		rr.records++
		return nil
	}
}

// readLine returns the next line without its line ending. A line over the
// limit is consumed and reported with tooLong.
func (rr *RecordReader) readLine() (line []byte, tooLong bool, err error) {
	rr.long = rr.long[:0]
	size := 0
	for {
		frag, err := rr.br.ReadSlice('\n')
		size += len(frag)
		if size > rr.maxLine+2 {
			tooLong = true
		} else if err == bufio.ErrBufferFull || len(rr.long) > 0 {
			rr.long = append(rr.long, frag...)
		}
		switch err {
		case bufio.ErrBufferFull:
			continue
		case nil:
		case io.EOF:
			if size == 0 {
				return nil, false, io.EOF
			}
		default:
			return nil, false, err
		}
		rr.line++
		if tooLong {
			return nil, true, nil
		}
		if len(rr.long) > 0 {
			frag = rr.long
		}
		frag = bytes.TrimSuffix(frag, []byte("\n"))
		frag = bytes.TrimSuffix(frag, []byte("\r"))
		if len(frag) > rr.maxLine {
			return nil, true, nil
		}
		return frag, false, nil
	}
}

func (rr *RecordReader) parseHeader(b []byte) error {
	bad := &LineError{Line: 1, Msg: `the first line must be the header {"godwit_recording":1,...}`}
	if _, _, ok := rr.syntax.check(b); !ok || b[skipSpace(b, 0)] != '{' {
		return bad
	}
	var h RecordingHeader
	var version []byte
	forEachMember(b, func(k, v []byte) bool {
		switch string(rr.key(k)) {
		case "godwit_recording":
			version = v
		case "created":
			if s, ok := rr.str(v); ok {
				h.Created = s
			}
		case "note":
			if s, ok := rr.str(v); ok {
				h.Note = s
			}
		}
		return true
	})
	if version == nil {
		return bad
	}
	ver, ok := parseInt64(version)
	if !ok || ver != RecordingVersion {
		return ErrRecordingVersion
	}
	h.Version = int(ver)
	rr.header, rr.hasHeader = h, true
	return nil
}

// parseRecord fills rec from one line; it returns "" or what is wrong.
func (rr *RecordReader) parseRecord(b []byte, rec *Record) string {
	if _, serr, ok := rr.syntax.check(b); !ok {
		return "not valid JSON at byte " + strconv.Itoa(serr.off) + ": " + serr.why
	}
	if b[skipSpace(b, 0)] != '{' {
		return "not a JSON object"
	}
	var rx, topic, qos, retain, payload, payload64 []byte
	forEachMember(b, func(k, v []byte) bool {
		switch string(rr.key(k)) {
		case "rx_ns":
			rx = v
		case "topic":
			topic = v
		case "qos":
			qos = v
		case "retain":
			retain = v
		case "payload":
			payload = v
		case "payload_b64":
			payload64 = v
		}
		return true
	})
	*rec = Record{Line: rr.line}
	var ok bool
	if rx == nil {
		return "rx_ns is missing"
	}
	if rec.RxNs, ok = parseInt64(rx); !ok {
		return "rx_ns must be an integer number of ns"
	}
	if topic == nil || topic[0] != '"' {
		return "topic must be a string"
	}
	rr.scratch = unquote(rr.scratch[:0], topic)
	rec.Topic = rr.internTopic(rr.scratch)
	if qos != nil {
		q, ok := parseInt64(qos)
		if !ok || q < 0 || q > 2 {
			return "qos must be 0, 1 or 2"
		}
		rec.QoS = byte(q)
	}
	if retain != nil {
		switch string(retain) {
		case "true":
			rec.Retained = true
		case "false":
		default:
			return "retain must be true or false"
		}
	}
	switch {
	case (payload == nil) == (payload64 == nil):
		return "needs exactly one of payload and payload_b64"
	case payload != nil:
		if payload[0] != '{' {
			return "payload must be a JSON object (use payload_b64 for other bytes)"
		}
		rec.Payload = payload
	default:
		if payload64[0] != '"' {
			return "payload_b64 must be a string"
		}
		rr.scratch = unquote(rr.scratch[:0], payload64)
		var err error
		rr.payload, err = base64.StdEncoding.AppendDecode(rr.payload[:0], rr.scratch)
		if err != nil {
			return "payload_b64 is not valid base64"
		}
		rec.Payload = rr.payload
	}
	return ""
}

func (rr *RecordReader) key(raw []byte) []byte {
	if !hasEscape(raw) {
		return raw[1 : len(raw)-1]
	}
	rr.scratch = unquote(rr.scratch[:0], raw)
	return rr.scratch
}

func (rr *RecordReader) str(raw []byte) (string, bool) {
	if len(raw) == 0 || raw[0] != '"' {
		return "", false
	}
	return string(unquote(nil, raw)), true
}

func (rr *RecordReader) internTopic(b []byte) string {
	if s, ok := rr.topics[string(b)]; ok {
		return s
	}
	s := string(b)
	if len(rr.topics) < maxInternedTopics {
		rr.topics[s] = s
	}
	return s
}

// forEachMember calls fn with the raw key (quotes included) and the raw value
// of each member of the object in b, which must have passed the syntax check.
func forEachMember(b []byte, fn func(key, val []byte) bool) {
	i := skipSpace(b, 0) + 1 // past '{'
	for {
		i = skipSpace(b, i)
		if i >= len(b) || b[i] == '}' {
			return
		}
		kend := skipString(b, i)
		key := b[i:kend]
		i = skipSpace(b, kend) + 1 // past ':'
		i = skipSpace(b, i)
		vend := skipValue(b, i)
		if !fn(key, b[i:vend]) {
			return
		}
		i = skipSpace(b, vend)
		if i < len(b) && b[i] == ',' {
			i++
		}
	}
}

// skipValue returns the end of the (syntactically valid) value at b[i].
func skipValue(b []byte, i int) int {
	switch b[i] {
	case '"':
		return skipString(b, i)
	case '{', '[':
		depth := 0
		for j := i; j < len(b); j++ {
			switch b[j] {
			case '"':
				j = skipString(b, j) - 1
			case '{', '[':
				depth++
			case '}', ']':
				depth--
				if depth == 0 {
					return j + 1
				}
			}
		}
		return len(b)
	case 't', 'n':
		return i + 4
	case 'f':
		return i + 5
	default:
		end, _ := scanNumber(b, i)
		return end
	}
}

// skipString returns the index after the closing quote of the valid string
// starting at b[i]. A plain loop: keys and values here are short, where
// bytes.IndexByte's call overhead costs more than it saves.
func skipString(b []byte, i int) int {
	for j := i + 1; j < len(b); j++ {
		switch b[j] {
		case '\\':
			j++
		case '"':
			return j + 1
		}
	}
	return len(b)
}

// hasEscape reports whether a raw string (quotes included) contains an escape.
func hasEscape(raw []byte) bool {
	for _, c := range raw {
		if c == '\\' {
			return true
		}
	}
	return false
}

// unquote appends the decoded content of the valid JSON string raw (quotes
// included) to dst. Unpaired surrogates become U+FFFD, as in encoding/json.
func unquote(dst, raw []byte) []byte {
	s := raw[1 : len(raw)-1]
	for i := 0; i < len(s); i++ {
		c := s[i]
		if c != '\\' {
			dst = append(dst, c)
			continue
		}
		i++
		switch s[i] {
		case 'b':
			dst = append(dst, '\b')
		case 'f':
			dst = append(dst, '\f')
		case 'n':
			dst = append(dst, '\n')
		case 'r':
			dst = append(dst, '\r')
		case 't':
			dst = append(dst, '\t')
		case 'u':
			r := hex4(s[i+1 : i+5])
			i += 4
			if utf16.IsSurrogate(r) {
				if i+6 < len(s) && s[i+1] == '\\' && s[i+2] == 'u' {
					if r2 := hex4(s[i+3 : i+7]); utf16.DecodeRune(r, r2) != utf8.RuneError {
						r = utf16.DecodeRune(r, r2)
						i += 6
						dst = utf8.AppendRune(dst, r)
						continue
					}
				}
				r = utf8.RuneError
			}
			dst = utf8.AppendRune(dst, r)
		default: // " \ /
			dst = append(dst, s[i])
		}
	}
	return dst
}

func hex4(b []byte) rune {
	var r rune
	for _, c := range b[:4] {
		r <<= 4
		switch {
		case c >= '0' && c <= '9':
			r |= rune(c - '0')
		case c >= 'a' && c <= 'f':
			r |= rune(c - 'a' + 10)
		default:
			r |= rune(c - 'A' + 10)
		}
	}
	return r
}
