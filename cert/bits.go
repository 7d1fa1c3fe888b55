package cert

// Trie codes are bit strings, most significant bit of each byte first
// (SPEC.md, "Trie codes").

// BitWriter accumulates a bit string.
type BitWriter struct {
	buf []byte
	acc uint64 // pending bits, right-aligned
	n   uint   // number of pending bits, < 64
}

// WriteBits appends the low n bits of x (n <= 64), most significant first.
func (w *BitWriter) WriteBits(x uint64, n uint) {
	if n == 0 {
		return
	}
	if n < 64 {
		x &= 1<<n - 1
	}
	if w.n+n < 64 {
		w.acc = w.acc<<n | x
		w.n += n
		return
	}
	room := 64 - w.n // 1..64 bits complete the word
	word := w.acc<<room | x>>(n-room)
	w.buf = append(w.buf, byte(word>>56), byte(word>>48), byte(word>>40), byte(word>>32),
		byte(word>>24), byte(word>>16), byte(word>>8), byte(word))
	w.n = n - room
	if w.n == 0 {
		w.acc = 0
	} else {
		w.acc = x & (1<<w.n - 1)
	}
}

// AppendString appends n bits held in words, most significant bit of
// words[0] first.
func (w *BitWriter) AppendString(words []uint64, n uint) {
	for _, word := range words {
		if n == 0 {
			return
		}
		if n >= 64 {
			w.WriteBits(word, 64)
			n -= 64
			continue
		}
		w.WriteBits(word>>(64-n), n)
		return
	}
}

// Len returns the number of bits written.
func (w *BitWriter) Len() uint64 { return uint64(len(w.buf))*8 + uint64(w.n) }

// Bytes returns the bit string padded with zero bits to whole bytes. The
// writer stays usable.
func (w *BitWriter) Bytes() []byte {
	out := append([]byte(nil), w.buf...)
	for rest, acc := w.n, w.acc<<(64-w.n); rest > 0; {
		out = append(out, byte(acc>>56))
		acc <<= 8
		rest -= min(rest, 8)
	}
	return out
}

// Words returns the bit string as 64-bit words, left-aligned, for
// AppendString.
func (w *BitWriter) Words() []uint64 {
	words := make([]uint64, 0, len(w.buf)/8+1)
	for i := 0; i+8 <= len(w.buf); i += 8 {
		b := w.buf[i : i+8]
		words = append(words, uint64(b[0])<<56|uint64(b[1])<<48|uint64(b[2])<<40|uint64(b[3])<<32|
			uint64(b[4])<<24|uint64(b[5])<<16|uint64(b[6])<<8|uint64(b[7]))
	}
	if w.n > 0 {
		words = append(words, w.acc<<(64-w.n))
	}
	return words
}

// Reset empties the writer, keeping its buffer.
func (w *BitWriter) Reset() { w.buf, w.acc, w.n = w.buf[:0], 0, 0 }

// bitReader reads a bit string of a known length.
type bitReader struct {
	buf  []byte
	pos  uint64
	nbit uint64
}

func (r *bitReader) bit() (uint64, bool) {
	if r.pos >= r.nbit {
		return 0, false
	}
	b := uint64(r.buf[r.pos>>3]>>(7-r.pos&7)) & 1
	r.pos++
	return b, true
}
