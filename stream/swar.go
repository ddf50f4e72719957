package stream

import "encoding/binary"

// Word-at-a-time byte tests ("SWAR"): eight bytes of a JSON string are
// checked with a few integer operations instead of eight comparisons. The
// classic bit tricks (haszero/hasless, see "Bit Twiddling Hacks", common
// practice) are exact as booleans: the result is non-zero if and only if some
// byte matches, which is all the scanners need before they look byte by byte.

const (
	swarOnes = 0x0101010101010101
	swarHigh = 0x8080808080808080
)

// hasZeroByte reports whether some byte of x is 0.
func hasZeroByte(x uint64) uint64 { return (x - swarOnes) & ^x & swarHigh }

// hasByte reports whether some byte of x equals b.
func hasByte(x uint64, b byte) uint64 { return hasZeroByte(x ^ (swarOnes * uint64(b))) }

// hasLess reports whether some byte of x is below n (n <= 128).
func hasLess(x uint64, n byte) uint64 { return (x - swarOnes*uint64(n)) & ^x & swarHigh }

// plainRun returns how many leading bytes of b, in whole words of eight, are
// plain ASCII string content: not a quote, backslash, control character, DEL
// or non-ASCII byte.
func plainRun(b []byte) int {
	i := 0
	for ; i+8 <= len(b); i += 8 {
		w := binary.LittleEndian.Uint64(b[i:])
		if (hasByte(w, '"') | hasByte(w, '\\') | hasLess(w, 0x20) | hasByte(w, 0x7f) | (w & swarHigh)) != 0 {
			break
		}
	}
	return i
}

// skipRun returns how many leading bytes of b, in whole words of eight, can
// be skipped inside a JSON string whose content is ignored: anything but a
// quote, backslash or control character.
func skipRun(b []byte) int {
	i := 0
	for ; i+8 <= len(b); i += 8 {
		w := binary.LittleEndian.Uint64(b[i:])
		if (hasByte(w, '"') | hasByte(w, '\\') | hasLess(w, 0x20)) != 0 {
			break
		}
	}
	return i
}
