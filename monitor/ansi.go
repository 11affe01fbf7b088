package monitor

import "strconv"

// The only terminal control this package sends: ECMA-48 (5th ed., 1991)
// control functions that every terminal emulator in use understands. They
// are kept here, in one place, so that nothing else writes escape codes.
//
//	CR        carriage return: back to column 1
//	CSI n A   cursor up n lines (CUU, §8.3.22)
//	CSI K     erase from the cursor to the end of the line (EL, §8.3.41)
//	CSI J     erase from the cursor to the end of the screen (ED, §8.3.39)

const (
	eraseLine   = "\x1b[K"
	eraseScreen = "\x1b[J"
)

// appendCursorUp appends the sequence that moves the cursor up n lines to
// column 1 (nothing when n ≤ 0).
func appendCursorUp(b []byte, n int) []byte {
	b = append(b, '\r')
	if n <= 0 {
		return b
	}
	b = append(b, "\x1b["...)
	b = strconv.AppendInt(b, int64(n), 10)
	return append(b, 'A')
}
