package transport

// A strict JSON syntax check (RFC 8259) that allocates nothing once its stack
// has grown. Every measurement payload and recording line passes it first,
// so the field walks after it can trust the bytes, and "bad_json" means
// exactly what encoding/json would reject. (fastjson's parser was tried and
// is lenient on purpose: it accepts NaN, loose numbers, unchecked escapes.)

// maxJSONNesting matches encoding/json (scanner.go, maxNestingDepth), so a
// document is valid here exactly when json.Valid says so.
const maxJSONNesting = 10000

type syntaxChecker struct {
	stack []byte // '{' or '[' per open container
	// top lists the members of a top-level object as the check finds them,
	// so a decoder can go straight to a field without scanning again.
	top []memberSpan
}

// memberSpan locates one member: b[k0:k1] is the key with its quotes and
// b[v0:v1] the value.
type memberSpan struct{ k0, k1, v0, v1 int }

// syntaxError says where and why a document is not JSON. why is a constant
// string so reporting it costs nothing.
type syntaxError struct {
	off int
	why string
}

// check reports whether b holds exactly one JSON value with optional
// surrounding whitespace. depth is the deepest nesting seen.
func (c *syntaxChecker) check(b []byte) (depth int, serr syntaxError, ok bool) {
	c.stack = c.stack[:0]
	c.top = c.top[:0]
	n := len(b)
	i := skipSpace(b, 0)
	for {
		// A value starts at i.
		if i >= n {
			return depth, syntaxError{i, "unexpected end of input"}, false
		}
		switch ch := b[i]; {
		case ch == '{' || ch == '[':
			c.stack = append(c.stack, ch)
			if len(c.stack) > maxJSONNesting {
				return depth, syntaxError{i, "nested too deeply"}, false
			}
			depth = max(depth, len(c.stack))
			i = skipSpace(b, i+1)
			if i < n && (ch == '{' && b[i] == '}' || ch == '[' && b[i] == ']') {
				c.stack = c.stack[:len(c.stack)-1]
				i++
				break
			}
			if ch == '{' {
				k0 := i
				k1, v0, e := scanMember(b, i)
				if e.why != "" {
					return depth, e, false
				}
				if len(c.stack) == 1 {
					c.top = append(c.top, memberSpan{k0, k1, v0, -1})
				}
				i = v0
			}
			continue
		case ch == '"':
			end, e := scanString(b, i)
			if e.why != "" {
				return depth, e, false
			}
			i = end
		case ch == 't':
			if !hasWord(b, i, "true") {
				return depth, syntaxError{i, "invalid literal"}, false
			}
			i += 4
		case ch == 'f':
			if !hasWord(b, i, "false") {
				return depth, syntaxError{i, "invalid literal"}, false
			}
			i += 5
		case ch == 'n':
			if !hasWord(b, i, "null") {
				return depth, syntaxError{i, "invalid literal"}, false
			}
			i += 4
		case ch == '-' || ch >= '0' && ch <= '9':
			end, e := scanNumber(b, i)
			if e.why != "" {
				return depth, e, false
			}
			i = end
		default:
			return depth, syntaxError{i, "invalid character where a value should start"}, false
		}

		// After a complete value: close containers or move to the next element.
		for {
			if len(c.stack) == 1 && len(c.top) > 0 && c.top[len(c.top)-1].v1 < 0 {
				c.top[len(c.top)-1].v1 = i // a top-level member's value ends here
			}
			i = skipSpace(b, i)
			if len(c.stack) == 0 {
				if i != n {
					return depth, syntaxError{i, "data after the top-level value"}, false
				}
				return depth, syntaxError{}, true
			}
			if i >= n {
				return depth, syntaxError{i, "unexpected end of input"}, false
			}
			top := c.stack[len(c.stack)-1]
			if b[i] == ',' {
				i = skipSpace(b, i+1)
				if top == '{' {
					k0 := i
					k1, v0, e := scanMember(b, i)
					if e.why != "" {
						return depth, e, false
					}
					if len(c.stack) == 1 {
						c.top = append(c.top, memberSpan{k0, k1, v0, -1})
					}
					i = v0
				}
				break
			}
			if top == '{' && b[i] == '}' || top == '[' && b[i] == ']' {
				c.stack = c.stack[:len(c.stack)-1]
				i++
				continue
			}
			return depth, syntaxError{i, "expected ',' or a closing bracket"}, false
		}
	}
}

// scanMember scans `"key" :` and the whitespace after it; it returns the end
// of the key and where the value starts.
func scanMember(b []byte, i int) (keyEnd, value int, e syntaxError) {
	if i >= len(b) || b[i] != '"' {
		return i, i, syntaxError{i, "expected a string key"}
	}
	end, e := scanString(b, i)
	if e.why != "" {
		return end, end, e
	}
	i = skipSpace(b, end)
	if i >= len(b) || b[i] != ':' {
		return end, i, syntaxError{i, "expected ':' after an object key"}
	}
	return end, skipSpace(b, i+1), syntaxError{}
}

func skipSpace(b []byte, i int) int {
	for i < len(b) && (b[i] == ' ' || b[i] == '\n' || b[i] == '\t' || b[i] == '\r') {
		i++
	}
	return i
}

func hasWord(b []byte, i int, w string) bool {
	return len(b)-i >= len(w) && string(b[i:i+len(w)]) == w
}

// scanString scans a string starting at the quote b[i] and returns the index
// after the closing quote. Like encoding/json it accepts invalid UTF-8.
func scanString(b []byte, i int) (int, syntaxError) {
	for j := i + 1; j < len(b); j++ {
		switch ch := b[j]; {
		case ch == '"':
			return j + 1, syntaxError{}
		case ch < 0x20:
			return j, syntaxError{j, "control character in a string"}
		case ch == '\\':
			j++
			if j >= len(b) {
				return j, syntaxError{j, "unterminated string"}
			}
			switch b[j] {
			case '"', '\\', '/', 'b', 'f', 'n', 'r', 't':
			case 'u':
				if len(b)-j <= 4 || !isHex(b[j+1]) || !isHex(b[j+2]) || !isHex(b[j+3]) || !isHex(b[j+4]) {
					return j, syntaxError{j, `invalid \u escape`}
				}
				j += 4
			default:
				return j, syntaxError{j, "invalid escape in a string"}
			}
		}
	}
	return len(b), syntaxError{len(b), "unterminated string"}
}

func isHex(c byte) bool {
	return c >= '0' && c <= '9' || c >= 'a' && c <= 'f' || c >= 'A' && c <= 'F'
}

func isDigit(c byte) bool { return c >= '0' && c <= '9' }

// scanNumber scans -?(0|[1-9][0-9]*)(\.[0-9]+)?([eE][+-]?[0-9]+)? (RFC 8259 §6).
func scanNumber(b []byte, i int) (int, syntaxError) {
	n := len(b)
	if b[i] == '-' {
		i++
	}
	switch {
	case i < n && b[i] == '0':
		i++
	case i < n && b[i] >= '1' && b[i] <= '9':
		for i < n && isDigit(b[i]) {
			i++
		}
	default:
		return i, syntaxError{i, "invalid number"}
	}
	if i < n && b[i] == '.' {
		i++
		if i >= n || !isDigit(b[i]) {
			return i, syntaxError{i, "invalid number: no digits after '.'"}
		}
		for i < n && isDigit(b[i]) {
			i++
		}
	}
	if i < n && (b[i] == 'e' || b[i] == 'E') {
		i++
		if i < n && (b[i] == '+' || b[i] == '-') {
			i++
		}
		if i >= n || !isDigit(b[i]) {
			return i, syntaxError{i, "invalid number: no digits in the exponent"}
		}
		for i < n && isDigit(b[i]) {
			i++
		}
	}
	return i, syntaxError{}
}
