package matrixio

import (
	"bytes"
	"os"
	"testing"
)

// BenchmarkParseChunk parses one chunk of the Poisson benchmark file on one
// goroutine, beside bytes.Count over the same bytes (a pass that does
// nothing but read them), so that the ratio of the two is a figure that a
// busy machine does not move much.
func BenchmarkParseChunk(b *testing.B) {
	path := benchFile(b, 60)
	f, err := os.Open(path)
	if err != nil {
		b.Fatal(err)
	}
	defer f.Close()
	h := newHeadReader(f, path, Options{})
	var info Info
	hd, err := h.readHeader(&info)
	if err != nil {
		b.Fatal(err)
	}
	buf := make([]byte, chunkSize)
	n, _ := fill(h.br, buf)
	text := buf[:bytes.LastIndexByte(buf[:n], '\n')+1]
	p := &dataParser{hd: hd}
	b.Run("parse", func(b *testing.B) {
		b.SetBytes(int64(len(text)))
		for b.Loop() {
			c := &chunk{text: text}
			p.parse(c)
			if c.err != nil {
				b.Fatal(c.err)
			}
		}
	})
	b.Run("count-newlines", func(b *testing.B) {
		b.SetBytes(int64(len(text)))
		for b.Loop() {
			if bytes.Count(text, []byte{'\n'}) == 0 {
				b.Fatal("no lines")
			}
		}
	})
}
