package check

import "encoding/binary"

// memo holds the expected codes of the last levels of every subtree. Below
// depth tb = j - L the codes of a subtree depend only on its odd-step count
// s and on v mod 2^L, so they are derived once per pair and compared with
// the chunk as a bit string. A match confirms every claim in the subtree at
// once; a mismatch sends the walk through the subtree class by class, which
// names the first false claim. The memo only makes the check faster: the
// verdict is the same without it.
type memo struct {
	depth int
	mask  uint64
	codes [][]memoCode // [s][v mod 2^L]
}

type memoCode struct {
	words     []uint64 // the code, left-aligned
	n         uint64   // its length in bits
	survivors uint64
	closed    []uint64 // closings at steps depth+1..j
}

const memoLevels = 8

func (sv *sieve) newMemo() *memo {
	levels := min(memoLevels, sv.j-sv.d)
	m := &memo{depth: sv.j - levels, mask: 1<<levels - 1, codes: make([][]memoCode, sv.j-levels+1)}
	for s := range m.codes {
		if sv.alen[s] <= m.depth {
			continue // a class with this few odd steps is closed by now
		}
		m.codes[s] = make([]memoCode, 1<<levels)
		for u := range m.codes[s] {
			g := &expected{sv: sv, closed: make([]uint64, sv.j+1)}
			g.subtree(m.depth, s, uint64(u))
			if g.fill > 0 {
				g.words = append(g.words, g.acc<<(64-g.fill))
			}
			m.codes[s][u] = memoCode{words: g.words, n: g.n, survivors: g.survivors, closed: g.closed[m.depth+1:]}
		}
	}
	return m
}

// expected writes the true codes of a subtree, as the walk expects them.
type expected struct {
	sv        *sieve
	words     []uint64
	acc       uint64
	fill      uint
	n         uint64
	survivors uint64
	closed    []uint64
}

func (g *expected) put(b uint64) {
	g.acc = g.acc<<1 | b
	g.fill++
	g.n++
	if g.fill == 64 {
		g.words, g.acc, g.fill = append(g.words, g.acc), 0, 0
	}
}

func (g *expected) subtree(t, s int, v uint64) {
	sv := g.sv
	if t == sv.j {
		g.survivors++
		return
	}
	even := v & 1
	if sv.closesAt(t+1, s) {
		g.put(1)
		g.put(even)
		g.closed[t+1]++
		g.subtree(t+1, s+1, (sv.a*(v+(1-even)*sv.apow[s])+sv.b)>>1)
		return
	}
	g.put(0)
	for c := uint64(0); c < 2; c++ {
		vc, sc := sv.step(v+c*sv.apow[s], s)
		g.subtree(t+1, sc, vc)
	}
}

// window returns the 64 code bits from position pos, zero beyond the end.
func (w *walk) window(pos uint64) uint64 {
	at, sh := pos/8, pos%8
	if at+9 <= uint64(len(w.code)) {
		return binary.BigEndian.Uint64(w.code[at:])<<sh | uint64(w.code[at+8])>>(8-sh)
	}
	var x uint64
	for i := uint64(0); i < 9; i++ {
		var b uint64
		if at+i < uint64(len(w.code)) {
			b = uint64(w.code[at+i])
		}
		if i < 8 {
			x |= b << (56 - 8*i) << sh
		} else {
			x |= b >> (8 - sh)
		}
	}
	return x
}

// matches reports whether the code at the walk's position is c, and if so
// moves past it.
func (w *walk) matches(c *memoCode) bool {
	if w.pos+c.n > w.nbit {
		return false
	}
	for i, want := range c.words {
		got := w.window(w.pos + 64*uint64(i))
		if rest := c.n - 64*uint64(i); rest < 64 {
			got &^= ^uint64(0) >> rest
		}
		if got != want {
			return false
		}
	}
	w.pos += c.n
	w.survivors += c.survivors
	for i, k := range c.closed {
		w.closed[w.memo.depth+1+i] += k
	}
	return true
}
