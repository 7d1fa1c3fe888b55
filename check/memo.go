package check

import (
	"sync"

	"descent/check/kernel"
)

// memo holds the codes of the last memoLevels levels of every subtree.
// Below depth j - L the codes of a subtree depend only on its odd-step
// count s and on v mod 2^L, so they are written once per pair here and
// handed to the kernel, which walks each entry class by class
// (kernel.Params.Subtree) and keeps only the true ones. The walk of a
// chunk then compares the chunk's bits with a kept entry and takes every
// claim in the subtree at once; a mismatch, or no kept entry, sends it
// through the subtree class by class. A wrong entry here costs speed,
// never soundness: the kernel never takes one it has not walked.
type memo struct {
	depth int
	mask  uint64
	codes [][]*kernel.Subtree // [s][v mod 2^L]; nil where no entry was kept
}

const memoLevels = 8

func newMemo(p *kernel.Params) kernel.Memo {
	levels := min(memoLevels, p.J-p.D)
	m := &memo{depth: p.J - levels, mask: 1<<levels - 1, codes: make([][]*kernel.Subtree, p.J-levels+1)}
	var wg sync.WaitGroup
	for s := range m.codes {
		if p.Closes(m.depth, s) {
			continue // a class with this few odd steps is closed by now
		}
		m.codes[s] = make([]*kernel.Subtree, 1<<levels)
		wg.Add(1)
		go func() {
			defer wg.Done()
			for u := range m.codes[s] {
				g := &expected{p: p}
				g.subtree(m.depth, s, uint64(u))
				if g.fill > 0 {
					g.words = append(g.words, g.acc<<(64-g.fill))
				}
				m.codes[s][u] = p.Subtree(m.depth, s, uint64(u), g.words, g.n)
			}
		}()
	}
	wg.Wait()
	return m
}

func (m *memo) Depth() int { return m.depth }

func (m *memo) Lookup(s int, v uint64) *kernel.Subtree {
	if s < len(m.codes) && m.codes[s] != nil {
		return m.codes[s][v&m.mask]
	}
	return nil
}

// expected writes the codes of a subtree as a true certificate has them.
type expected struct {
	p     *kernel.Params
	words []uint64
	acc   uint64
	fill  uint
	n     uint64
}

func (g *expected) put(b uint64) {
	g.acc, g.fill, g.n = g.acc<<1|b, g.fill+1, g.n+1
	if g.fill == 64 {
		g.words, g.acc, g.fill = append(g.words, g.acc), 0, 0
	}
}

func (g *expected) subtree(t, s int, v uint64) {
	p := g.p
	if t == p.J {
		return
	}
	even := v & 1
	if p.Closes(t+1, s) {
		g.put(1)
		g.put(even)
		next, ns := p.Step(v+(1-even)*p.Pow(s), s)
		g.subtree(t+1, ns, next)
		return
	}
	g.put(0)
	for c := uint64(0); c < 2; c++ {
		vc, sc := p.Step(v+c*p.Pow(s), s)
		g.subtree(t+1, sc, vc)
	}
}
