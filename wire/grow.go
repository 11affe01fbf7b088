package wire

// Growth of the arrays an upload fills, so that the memory a server holds
// for it follows the bytes it has received instead of the sizes it
// declared: an array of count entries starts at growStart entries and
// doubles as entries arrive until it would pass count/GrowAmplification,
// then takes its full length. Memory held for an array therefore never
// exceeds GrowAmplification times the bytes received for it (plus the
// first growStart entries), and a client that declares a huge matrix and
// sends a byte holds next to nothing. The factor is our own choice: 8
// keeps the copies to a few and a final array's worth of old arrays (at
// most 1/8 of it) waiting for the collector.
const (
	GrowAmplification = 8
	growStart         = 1 << 16
)

// Charge accounts for memory an array grows into: called with the bytes an
// allocation adds before it is made (an error refuses it) and with the
// negative bytes of the array it replaces after the copy.
type Charge func(bytes int64) error

// Grow returns s with length need (need ≤ count, the array's final
// length), reallocating by the growth rule above when its capacity is
// short and charging each allocation (a nil charge allocates count at
// once, uncharged). size is the bytes of one entry.
func Grow[T any](s []T, need, count, size int, charge Charge) ([]T, error) {
	if need <= cap(s) {
		return s[:need], nil
	}
	c := count
	if charge != nil {
		c = max(2*cap(s), growStart, need)
		if c > count/GrowAmplification {
			c = count
		}
		if err := charge(int64(c) * int64(size)); err != nil {
			return nil, err
		}
	}
	t := make([]T, need, c)
	copy(t, s)
	if charge != nil && cap(s) > 0 {
		charge(-int64(cap(s)) * int64(size))
	}
	return t, nil
}
