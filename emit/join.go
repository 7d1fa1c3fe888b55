package emit

import (
	"context"
	"fmt"
	"math/big"
	"math/bits"
	"runtime"
	"sync/atomic"

	"golang.org/x/sync/errgroup"

	"descent/cert"
)

// Joins (SPEC.md, section 8). A survivor r mod 2^k joins r' < r when after
// k steps both have the same number of odd steps s and T^k(r) = T^k(r'):
// then T^k(2^k*q + r) = a^s*q + T^k(r) = T^k(2^k*q + r') for every q, and
// n = 2^k*q + r reaches whatever the smaller n - (r - r') reaches.
//
// For k <= ExhaustiveJoins every residue is followed for k steps and a
// survivor's partner is the smallest residue with its (s, T^k). Above, a
// survivor is tried against r - 1 only (pairWalk): survivors are odd, so
// r - 1 differs from r in bit 0 alone and follows r's bits from depth 1 on,
// and its state rides along the walk for little. That finds every join
// whose partner can be r - 1, and misses the survivors whose only partners
// lie further down (r - 2, r - 3, ...): for 3n+1, 14 of the 5084 joins of
// all residues at k = 20, 329 of 52425 at k = 24. A missed join is no
// error; the class stays a survivor to search.

// ExhaustiveJoins is the largest k for which joins are searched among all
// residues.
const ExhaustiveJoins = 20

// joinKey is the state of a residue after k steps: odd steps and value.
type joinKey struct {
	s int
	v uint64
}

// joinFinder knows, for each survivor, its partner if it has one.
type joinFinder struct {
	r       *rules
	partner map[joinKey]uint64 // exhaustive: (s, T^k) -> smallest residue
	maxD    int64              // pairLive follows |D| up to this; -1: never
}

func newJoinFinder(r *rules) (*joinFinder, error) {
	// Values stay exact in 64 bits: T^t(x) for x < 2^t is below
	// a^t*(1+|b|), which must be below 2^63 (3n+1: k <= 38).
	bound := new(big.Int).Exp(r.bigA, big.NewInt(int64(r.k)), nil)
	bound.Mul(bound, big.NewInt(1+max(int64(r.m.B), -int64(r.m.B))))
	if bound.BitLen() > 63 {
		return nil, fmt.Errorf("joins for %v at k = %d: values would pass 2^63; this program finds joins up to a^k*(1+|b|) < 2^63", r.m, r.k)
	}
	f := &joinFinder{r: r, maxD: -1}
	// pairLive's arithmetic stays in 62 bits while |a*D| and
	// |b|*a^bottomLevels do.
	if lim := new(big.Int).Exp(r.bigA, big.NewInt(bottomLevels+1), nil); lim.Mul(lim, big.NewInt(1+max(int64(r.m.B), -int64(r.m.B)))).BitLen() <= 60 {
		f.maxD = (1 << 60) / int64(r.a)
	}
	if r.k <= ExhaustiveJoins {
		f.partner = map[joinKey]uint64{}
		var all func(t, s int, v, res uint64)
		all = func(t, s int, v, res uint64) {
			if t == r.k {
				key := joinKey{s, v}
				if m, ok := f.partner[key]; !ok || res < m {
					f.partner[key] = res
				}
				return
			}
			for c := uint64(0); c < 2; c++ {
				vc := v + c*r.pow[s]
				if vc&1 == 0 {
					all(t+1, s, vc>>1, res|c<<t)
				} else {
					all(t+1, s+1, (r.a*vc+r.b)>>1, res|c<<t)
				}
			}
		}
		all(0, 0, 0, 0)
	}
	return f, nil
}

// count counts the joined survivors of the whole sieve, stub by stub on
// all cores. Only a shard needs it: its header names the count before the
// shard has seen the rest of the sieve.
func (f *joinFinder) count(ctx context.Context, workers int, table [][]bottom, levels int) (uint64, error) {
	r := f.r
	var stubs []stub
	gen := encoder{r: r, end: cert.SplitDepth(r.j), tb: -1, tally: newTally(r.j)}
	gen.stub = func(res uint64, s int, v uint64) error { stubs = append(stubs, stub{res: res, s: s, v: v}); return nil }
	if err := gen.top(0, 0, 0, 0); err != nil {
		return 0, err
	}
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	var total atomic.Uint64
	g, ctx := errgroup.WithContext(ctx)
	g.SetLimit(workers)
	for _, st := range stubs {
		g.Go(func() error {
			if err := ctx.Err(); err != nil {
				return err
			}
			e := encoder{r: r, end: r.j, tb: r.j - levels, mask: 1<<levels - 1, table: table, tally: newTally(r.j)}
			jw := f.chunk(&e, st, gen.end)
			total.Add(jw.Joined())
			return nil
		})
	}
	if err := g.Wait(); err != nil {
		return 0, err
	}
	return total.Load(), nil
}

// chunk writes the codes of the chunk below stub st (at depth d) with e,
// and returns its join section.
func (f *joinFinder) chunk(e *encoder, st stub, d int) *cert.JoinWriter {
	jw := &cert.JoinWriter{}
	if f.partner != nil {
		e.node(d, st.s, st.v)
		f.exhaustive(jw, st.res, d)
		return jw
	}
	// The stub's partner is res - 1: the stub is odd (an even class closes
	// at step 1), and from depth 1 on both follow the bits of res.
	w, z := st.res-1, 0
	for range d {
		w, z = f.r.step64(w, z)
	}
	pw := pairWalk{f: f, e: e, jw: jw}
	pw.node(d, st.s, st.v, z, w)
	return jw
}

// exhaustive walks the survivors below the stub res mod 2^d and looks each
// one's partner up among all residues.
func (f *joinFinder) exhaustive(jw *cert.JoinWriter, res uint64, d int) {
	r := f.r
	v, s := res, 0
	for range d {
		v, s = r.step64(v, s)
	}
	var walk func(t, s int, v, res uint64)
	walk = func(t, s int, v, res uint64) {
		if t == r.k {
			if m, ok := f.partner[joinKey{s, v}]; ok && m < res {
				jw.Join(res - m)
			} else {
				jw.Keep()
			}
			return
		}
		for c := uint64(0); c < 2; c++ {
			vc := v + c*r.pow[s]
			if vc&1 == 0 && r.closes(t+1, s) {
				continue
			}
			nv, ns := r.step64(vc, s)
			walk(t+1, ns, nv, res|c<<t)
		}
	}
	walk(d, s, v, res)
}

// pairWalk writes a chunk's codes and its joins with partner r - 1 in one
// walk. Beside the class's state (t, s, v) it carries the partner's (z, w):
// both are T^t of the class and of its partner, exact.
//
// Two shortcuts keep it near the speed of the plain encoder. Once the
// states are equal the paths have met, and every survivor below is joined:
// the plain encoder writes the subtree and the survivors are counted. And
// where the bottom table takes over, a subtree whose pair cannot meet in
// the steps left (pairLive) has no join at all.
type pairWalk struct {
	f  *joinFinder
	e  *encoder
	jw *cert.JoinWriter
}

func (p *pairWalk) node(t, s int, v uint64, z int, w uint64) {
	e, r := p.e, p.f.r
	for {
		if s == z && v == w {
			before := e.tally.open
			e.node(t, s, v)
			p.jw.Neighbours(e.tally.open - before)
			return
		}
		if t == e.end {
			e.tally.open++
			p.jw.Keep()
			return
		}
		if t == e.tb {
			before := e.tally.open
			e.node(t, s, v) // the codes, from the table
			if p.pairLive(r.k-t, s, v, z, w) {
				p.flags(t, s, v, z, w)
			} else {
				p.jw.Keeps(e.tally.open - before)
			}
			return
		}
		even := v & 1
		if r.closes(t+1, s) {
			e.w.WriteBits(2|even, 2)
			e.tally.closed[t+1]++
			odd := 1 - even
			v, s = r.step64(v+r.pow[s]*odd, s)
			w, z = r.step64(w+r.pow[z]*odd, z)
			t++
			continue
		}
		e.w.WriteBits(0, 1)
		v0, s0 := r.step64(v, s)
		w0, z0 := r.step64(w, z)
		p.node(t+1, s0, v0, z0, w0)
		v, s = r.step64(v+r.pow[s], s)
		w, z = r.step64(w+r.pow[z], z)
		t++
	}
}

// flags records the joins of the survivors below (t, s, v), one by one.
func (p *pairWalk) flags(t, s int, v uint64, z int, w uint64) {
	r := p.f.r
	if s == z && v == w {
		p.jw.Join(1)
		return
	}
	if t == r.k {
		p.jw.Keep()
		return
	}
	for c := uint64(0); c < 2; c++ {
		vc := v + c*r.pow[s]
		if vc&1 == 0 && r.closes(t+1, s) {
			continue
		}
		nv, ns := r.step64(vc, s)
		nw, nz := r.step64(w+c*r.pow[z], z)
		if ns == nz && nv == nw { // met: all survivors below are joined
			sub := encoder{r: r, end: r.k, tb: -1, tally: newTally(r.j)}
			sub.node(t+1, ns, nv)
			p.jw.Neighbours(sub.tally.open)
			continue
		}
		p.flags(t+1, ns, nv, nz, nw)
	}
}

// pairLive says whether the paths of a class and its partner, at states
// (s, v) and (z, w), can still meet within R steps, by any parities.
//
// Write e = s - z and, for e >= 0, D = v - a^e*w. Both values are affine
// in the class's next bits with slopes a^s and a^z, so D does not depend
// on them; D mod 2 says whether the two values have the same parity, and
// each step takes (e, D) to one of two states whatever the values are:
//
//	D even, both even:   (e, D/2)
//	D even, both odd:    (e, (a*D + b*(1 - a^e))/2)
//	D odd, class odd:    (e+1, (a*D + b)/2)
//	D odd, class even:   (e-1, (D - a^(e-1)*b)/2), or for e = 0 the
//	                     partner leads: (1, (b - a*D)/2) with the roles swapped
//
// The paths meet when (e, D) = (0, 0), and e moves by one at most per step.
// pairLive answers "maybe" (true) where the numbers grow too large to
// follow; that costs time, never a join.
func (p *pairWalk) pairLive(R, s int, v uint64, z int, w uint64) bool {
	e := s - z
	if e < 0 {
		e, v, w = -e, w, v
	}
	if e > R {
		return false
	}
	hi, lo := bits.Mul64(p.f.r.pow[e], w)
	if hi != 0 || lo >= 1<<62 || v >= 1<<62 {
		return true
	}
	return p.rel(R, e, int64(v)-int64(lo))
}

func (p *pairWalk) rel(R, e int, d int64) bool {
	if e == 0 && d == 0 {
		return true
	}
	if R == 0 || e > R {
		return false
	}
	a, b := int64(p.f.r.a), int64(p.f.r.b)
	if d > p.f.maxD || d < -p.f.maxD {
		return true
	}
	var x bool
	ae := int64(p.f.r.pow[e])
	if d&1 == 0 {
		x = p.rel(R-1, e, d>>1) || p.rel(R-1, e, (a*d+b*(1-ae))>>1)
	} else {
		x = p.rel(R-1, e+1, (a*d+b)>>1)
		if !x && e > 0 {
			x = p.rel(R-1, e-1, (d-int64(p.f.r.pow[e-1])*b)>>1)
		} else if !x {
			x = p.rel(R-1, 1, (b-a*d)>>1)
		}
	}
	return x
}

// step64 is one step on an exact value below 2^63.
func (r *rules) step64(v uint64, s int) (uint64, int) {
	if v&1 == 0 {
		return v >> 1, s
	}
	return (r.a*v + r.b) >> 1, s + 1
}

// joinBits reads a chunk's join section back as one bit per survivor.
func joinBits(jw *cert.JoinWriter, open uint64) ([]uint64, error) {
	js, err := cert.ParseJoins(jw.AppendTo(nil), int(open), 0)
	if err != nil {
		return nil, err
	}
	bits := make([]uint64, (len(js.Joined)+63)/64)
	for x, j := range js.Joined {
		if j {
			bits[x/64] |= 1 << (x % 64)
		}
	}
	return bits, nil
}

// joinFlags lists, for each stub of a sieve with joins, which of its
// survivors the sieve's writer joins, one bit per survivor in the order of
// the codes: the flags a range on that sieve needs (SPEC.md, section 6).
func (r *rules) joinFlags(ctx context.Context, workers int) ([][]uint64, error) {
	f, err := newJoinFinder(r)
	if err != nil {
		return nil, err
	}
	d := cert.SplitDepth(r.j)
	levels := min(bottomLevels, r.j-d)
	table := buildBottom(r, levels)
	var stubs []stub
	gen := encoder{r: r, end: d, tb: -1, tally: newTally(r.j)}
	gen.stub = func(res uint64, s int, v uint64) error { stubs = append(stubs, stub{res: res, s: s, v: v}); return nil }
	if err := gen.top(0, 0, 0, 0); err != nil {
		return nil, err
	}
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	out := make([][]uint64, len(stubs))
	g, ctx := errgroup.WithContext(ctx)
	g.SetLimit(workers)
	for i, st := range stubs {
		g.Go(func() error {
			if err := ctx.Err(); err != nil {
				return err
			}
			e := encoder{r: r, end: r.j, tb: r.j - levels, mask: 1<<levels - 1, table: table, tally: newTally(r.j)}
			bits, err := joinBits(f.chunk(&e, st, d), e.tally.open)
			out[i] = bits
			return err
		})
	}
	return out, g.Wait()
}
