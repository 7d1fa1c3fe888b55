package emit

import (
	"context"
	"fmt"
	"io"
	"math/big"
	"math/bits"
	"runtime"
	"sort"
	"sync"

	"golang.org/x/sync/errgroup"

	"descent/cert"
)

// RangeParams names a range certificate: the sieve it rests on (its header
// and root), the range [Lo, Hi), the block exponent E (blocks are aligned
// intervals of 2^E numbers; 0 picks k+4) and the step cap of the search.
type RangeParams struct {
	Sieve     *cert.SieveHeader
	SieveRoot cert.Hash
	Lo, Hi    *big.Int
	E         int
	Cap       uint32
	// Ceiling is W, in bits: the search of a number stops, undecided, at
	// an iterate of 2^W or more. 0 picks cert.DefaultRangeCeiling.
	Ceiling int
	// Rules are predecessor rules (SPEC.md, section 9), tried in order on
	// the numbers of survivor classes before any search.
	Rules []cert.Rule
}

// RangeOptions tune a run without changing its output.
type RangeOptions struct {
	Workers int
	// Done holds the records of blocks already completed by an earlier run
	// of the same parameters, in order; the run goes on after them.
	Done [][]byte
	// Block is called with each newly completed block record, in order,
	// before the next block starts (to journal it).
	Block func(rec []byte) error
	// Progress is called after each block with the blocks done and the
	// numbers covered so far.
	Progress func(done, total int, numbers *big.Int)
	// Shard, if set, writes only this shard: its blocks, under the whole's
	// header with totals zero (merge adds them up). Done then counts from
	// the shard's first block.
	Shard *Shard
	// Sieve, if set, is what CheckSieveRoot derived of the sieve; it is
	// used when its root is the range's sieve root.
	Sieve *CheckedSieve
	// slow turns off the two-lane search and the rule masks (tests compare
	// the certificates written with and without them).
	slow bool
}

// RangeResult describes a written range certificate.
type RangeResult struct {
	Header *cert.RangeHeader
	Root   cert.Hash
	Size   int64
}

// DefaultRangeCap is the step cap of the search when none is given
// (common practice, no source: far above the largest stopping time known
// below 2^64, which is under 2000 steps of T).
const DefaultRangeCap = 100000

// NormalizeRange fills in defaults and checks what a range certificate
// needs of its parameters.
func NormalizeRange(p *RangeParams) error {
	h := p.Sieve
	if h.J != h.K {
		return fmt.Errorf("the sieve has j = %d < k = %d; a range certificate needs a sieve with j = k", h.J, h.K)
	}
	if p.E == 0 {
		p.E = min(h.K+4, cert.MaxBlockExp)
	}
	if p.Cap == 0 {
		p.Cap = DefaultRangeCap
	}
	if p.Ceiling == 0 && p.Hi != nil && p.Hi.Sign() > 0 {
		p.Ceiling = cert.DefaultRangeCeiling(h.Map, h.K, p.Hi)
	}
	switch {
	case p.E < h.K || p.E > cert.MaxBlockExp:
		return fmt.Errorf("block exponent %d: want %d (the sieve's k) to %d", p.E, h.K, cert.MaxBlockExp)
	case p.Cap <= uint32(h.K) || p.Cap > cert.MaxCap:
		return fmt.Errorf("cap %d: want more than k = %d and at most %d", p.Cap, h.K, cert.MaxCap)
	case p.Lo == nil || p.Hi == nil || p.Lo.Sign() <= 0 || p.Lo.Cmp(p.Hi) >= 0:
		return fmt.Errorf("range [%v, %v): want 1 <= from < to", p.Lo, p.Hi)
	case p.Hi.BitLen() > 8*cert.MaxNatBytes:
		return fmt.Errorf("to = %v: the format carries numbers of at most %d bits", p.Hi, 8*cert.MaxNatBytes)
	}
	if w := cert.RangeMinCeiling(h.Map, h.K, p.Hi); p.Ceiling < max(w, cert.MinCeiling) || p.Ceiling > cert.MaxCeiling {
		return fmt.Errorf("ceiling %d bits: want %d to %d for this map, k and range (an iterate within the k steps the search jumps must stay below 2^W)",
			p.Ceiling, max(w, cert.MinCeiling), cert.MaxCeiling)
	}
	if _, n := cert.BlockSpan(p.Lo, p.Hi, p.E); !n.IsInt64() || n.Int64() > cert.MaxRecords {
		return fmt.Errorf("the range has %v blocks of 2^%d; the format allows %d: use a larger -block", n, p.E, cert.MaxRecords)
	}
	if len(p.Rules) > cert.MaxRules {
		return fmt.Errorf("%d predecessor rules: the format allows %d", len(p.Rules), cert.MaxRules)
	}
	for _, rule := range p.Rules {
		if err := rule.Prove(h.Map); err != nil {
			return err
		}
		if rule.M > cert.MaxRuleModulus || rule.C > cert.MaxRuleModulus {
			return fmt.Errorf("rule %v: the format allows moduli and classes up to 2^62", rule)
		}
	}
	return nil
}

// CheckSieveRoot regenerates the sieve certificate that h describes and
// makes sure its root is root: a range certificate may only name the one
// canonical, true sieve for its map and k. What the regeneration learns
// on the way (the join flags) is returned for RangeOptions.Sieve.
func CheckSieveRoot(ctx context.Context, h *cert.SieveHeader, root cert.Hash, workers int) (*CheckedSieve, error) {
	c := &CheckedSieve{root: root}
	res, err := Sieve(ctx, discard{}, SieveParams{Map: h.Map, K: h.K, J: h.J, Cap: h.Cap, Ceiling: h.Ceiling, Joins: h.Joins}, Options{Workers: workers, joined: &c.joined})
	if err != nil {
		return nil, err
	}
	if res.Root != root {
		return nil, fmt.Errorf("the sieve file's root %v is not the root %v of the sieve for %v, k = %d, j = %d, cap %d, ceiling %d",
			root, res.Root, h.Map, h.K, h.J, h.Cap, h.Ceiling)
	}
	return c, nil
}

// CheckedSieve is what CheckSieveRoot derived of a sieve with a given
// root besides the root itself: for a sieve with joins, the join flags of
// its survivors, which a range on it would otherwise compute again.
type CheckedSieve struct {
	root   cert.Hash
	joined [][]uint64
}

type discard struct{}

func (discard) WriteAt(p []byte, _ int64) (int, error) { return len(p), nil }

// ranger holds what every block of a run needs.
type ranger struct {
	r     *rules
	p     RangeParams
	k, d  int
	small *big.Int // N0: numbers up to it are iterated directly
	inc   []uint64 // 2^k mod each rule's modulus
	stubs []uint64 // residues of the classes open at depth d, in trie order
	first *big.Int // index of the first block
	// joined[i]: for a sieve with joins, bit x says whether survivor x
	// below stub i (in the order of the codes) is joined.
	joined [][]uint64
	masks  *ruleMasks // nil: rules are tested member by member
	lanes  bool       // the two-lane search, else number by number
}

// Range searches [Lo, Hi) and writes the range certificate to w.
func Range(ctx context.Context, w io.WriterAt, p RangeParams, o RangeOptions) (*RangeResult, error) {
	if err := NormalizeRange(&p); err != nil {
		return nil, err
	}
	r, err := newRules(p.Sieve.Map, p.Sieve.K, p.Sieve.K)
	if err != nil {
		return nil, err
	}
	r.work = newMeter(ctx)
	r.ceiling = p.Ceiling
	g := &ranger{r: r, p: p, k: r.k, d: cert.SplitDepth(r.k), small: r.smallBound(), lanes: !o.slow}
	for _, rule := range p.Rules {
		g.inc = append(g.inc, new(big.Int).Mod(new(big.Int).Lsh(big.NewInt(1), uint(r.k)), new(big.Int).SetUint64(rule.M)).Uint64())
	}
	if len(p.Rules) > 0 && !o.slow {
		g.masks = newRuleMasks(p.Rules, r.k)
	}
	gen := encoder{r: r, end: g.d, tb: -1, tally: newTally(r.j)}
	gen.stub = func(res uint64, _ int, _ uint64) error { g.stubs = append(g.stubs, res); return nil }
	if err := gen.top(0, 0, 0, 0); err != nil {
		return nil, err
	}
	if p.Sieve.Joins && o.Sieve != nil && o.Sieve.root == p.SieveRoot && o.Sieve.joined != nil {
		g.joined = o.Sieve.joined
	} else if p.Sieve.Joins {
		if g.joined, err = r.joinFlags(ctx, o.Workers); err != nil {
			return nil, err
		}
	}
	first, nblocks := cert.BlockSpan(p.Lo, p.Hi, p.E)
	g.first = first
	total := int(nblocks.Int64())
	from, upto := 0, total // the blocks this run writes
	var cw *cert.Writer
	if o.Shard != nil {
		h := rangeHeader(r, p, total, zeroSummary(len(p.Rules)))
		hb, err := h.Marshal()
		if err != nil {
			return nil, err
		}
		var count int
		if cw, from, count, err = shardWriter(w, cert.KindRange, hb, total, o.Shard); err != nil {
			return nil, err
		}
		upto = from + count
	}
	if len(o.Done) > upto-from {
		return nil, fmt.Errorf("%d completed blocks for a run of %d", len(o.Done), upto-from)
	}
	workers := o.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}

	recs := make([][]byte, 0, upto-from)
	var blocks []*cert.Block
	covered := new(big.Int)
	for i := from; i < upto; i++ {
		var b *cert.Block
		if i-from < len(o.Done) {
			if b, err = cert.ParseBlock(o.Done[i-from], 0, len(p.Rules)); err != nil || b.Index != uint32(i) {
				return nil, fmt.Errorf("completed block %d from an earlier run is damaged or of another run: %v", i, err)
			}
			recs = append(recs, o.Done[i-from])
		} else {
			if b, err = g.block(ctx, i, workers); err != nil {
				return nil, err
			}
			rec, err := b.Marshal()
			if err != nil {
				return nil, err
			}
			if o.Block != nil {
				if err := o.Block(rec); err != nil {
					return nil, err
				}
			}
			recs = append(recs, rec)
		}
		blocks = append(blocks, b)
		lo, hi := g.span(i)
		covered.Add(covered, hi.Sub(hi, lo))
		if o.Progress != nil {
			o.Progress(i+1-from, upto-from, covered)
		}
	}

	h := rangeHeader(r, p, total, totals(blocks, len(p.Rules)))
	if cw == nil {
		hb, err := h.Marshal()
		if err != nil {
			return nil, err
		}
		if cw, err = cert.NewWriter(w, hb); err != nil {
			return nil, err
		}
	}
	for _, rec := range recs {
		if err := cw.WriteRecord(rec, cert.LeafHash(rec)); err != nil {
			return nil, err
		}
	}
	root, size, err := cw.Close()
	if err != nil {
		return nil, err
	}
	return &RangeResult{Header: h, Root: root, Size: size}, nil
}

func rangeHeader(r *rules, p RangeParams, blocks int, t cert.Summary) *cert.RangeHeader {
	return &cert.RangeHeader{Map: r.m, SieveRoot: p.SieveRoot, K: r.k, E: p.E, Cap: p.Cap, Ceiling: p.Ceiling,
		Lo: p.Lo, Hi: p.Hi, Rules: append([]cert.Rule{}, p.Rules...), Blocks: blocks, Totals: t}
}

func zeroSummary(rules int) cert.Summary {
	z := func() *big.Int { return new(big.Int) }
	s := cert.Summary{Sieve: z(), Join: z(), Search: z(), Small: z(), Cycle: z(), Undecided: z(), SigmaSum: z(), Rules: []*big.Int{}}
	for range rules {
		s.Rules = append(s.Rules, z())
	}
	return s
}

// span returns the numbers block i covers: [lo, hi).
func (g *ranger) span(i int) (lo, hi *big.Int) {
	x0 := new(big.Int).Add(g.first, big.NewInt(int64(i)))
	x0.Lsh(x0, uint(g.p.E))
	lo = maxBig(x0, g.p.Lo)
	hi = new(big.Int).Add(x0, new(big.Int).Lsh(big.NewInt(1), uint(g.p.E)))
	if hi.Cmp(g.p.Hi) > 0 {
		hi.Set(g.p.Hi)
	}
	return lo, hi
}

func maxBig(x, y *big.Int) *big.Int {
	if x.Cmp(y) >= 0 {
		return new(big.Int).Set(x)
	}
	return new(big.Int).Set(y)
}

// unit is one piece of a block's work: the numbers of the block at
// offsets [from, to) from the block start x0, restricted to the classes
// below one stub, or to the closing classes of the top of the trie, or to
// the small numbers.
type unit struct {
	g        *ranger
	x0       *big.Int
	x0u      uint64 // x0 when the whole block is below 2^64 (fast)
	fast     bool
	from, to uint64
	acc      acc
	jobs     []jumpJob // numbers waiting for the two-lane search
	offs     []uint64  // and their offsets
	x0mod    []uint64  // x0 mod each rule's modulus
	rem      []uint64  // the current number mod each rule's modulus
	x0modP   uint64    // x0 mod the masks' modulus
	joined   []uint64  // the join flags of the stub's survivors, if any
	surv     int       // survivors visited so far, in the order of the codes
}

// ruleStart sets the rule residues for the number at offset off.
func (u *unit) ruleStart(off uint64) {
	for i, rule := range u.g.p.Rules {
		u.rem[i] = (u.x0mod[i] + off%rule.M) % rule.M
	}
}

// ruleNext says which rule, if any, justifies the number at offset off
// (-1: none), and moves the residues on by 2^k to the next member.
func (u *unit) ruleNext(off uint64) int {
	match := -1
	for i, rule := range u.g.p.Rules {
		if match < 0 && u.rem[i] == rule.C%rule.M && (!u.fast || u.x0u+off >= rule.C) {
			match = i
		}
		if u.rem[i] += u.g.inc[i]; u.rem[i] >= rule.M {
			u.rem[i] -= rule.M
		}
	}
	return match
}

// block computes the summary of block i.
func (g *ranger) block(ctx context.Context, i, workers int) (*cert.Block, error) {
	lo, hi := g.span(i)
	x0 := new(big.Int).Add(g.first, big.NewInt(int64(i)))
	x0.Lsh(x0, uint(g.p.E))
	off := func(x *big.Int) uint64 { return new(big.Int).Sub(x, x0).Uint64() }
	from, to := off(lo), off(hi)
	// Numbers at or below N0 are iterated directly.
	split := from
	if x0.Cmp(g.small) <= 0 {
		split = min(max(off(new(big.Int).Add(g.small, big.NewInt(1))), from), to)
	}
	end := new(big.Int).Add(x0, new(big.Int).Lsh(big.NewInt(1), uint(g.p.E)))
	fast := end.BitLen() <= 64

	units := make([]*unit, 0, len(g.stubs)+2)
	newUnit := func(a, b uint64) *unit {
		u := &unit{g: g, x0: x0, fast: fast, from: a, to: b, acc: newAcc(g.k, len(g.p.Rules))}
		if fast {
			u.x0u = x0.Uint64()
		}
		if g.masks != nil {
			u.x0modP = new(big.Int).Mod(x0, new(big.Int).SetUint64(g.masks.p)).Uint64()
		}
		for _, rule := range g.p.Rules {
			u.x0mod = append(u.x0mod, new(big.Int).Mod(x0, new(big.Int).SetUint64(rule.M)).Uint64())
			u.rem = append(u.rem, 0)
		}
		units = append(units, u)
		return u
	}
	small := newUnit(from, split)
	top := newUnit(split, to)
	stubs := make([]*unit, len(g.stubs))
	for s := range g.stubs {
		stubs[s] = newUnit(split, to)
		if g.joined != nil {
			stubs[s].joined = g.joined[s]
		}
	}

	eg, ectx := errgroup.WithContext(ctx)
	eg.SetLimit(workers)
	eg.Go(func() error { small.smallNumbers(); return nil })
	eg.Go(func() error { g.r.leaves(0, 0, exact{}, 0, g.d, top); return nil })
	for s, res := range g.stubs {
		eg.Go(func() error {
			if err := ectx.Err(); err != nil {
				return err
			}
			sv, v := g.r.stubStart(res, g.d)
			u := stubs[s]
			buf := bufPool.Get().(*searchBuf)
			u.jobs, u.offs = buf.jobs[:0], buf.offs[:0]
			g.r.leaves(g.d, sv, v, res, g.k, u)
			u.flush()
			u.jobs, u.offs = nil, nil
			bufPool.Put(buf)
			return nil
		})
	}
	if err := eg.Wait(); err != nil {
		return nil, err
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	if err := g.r.work.failed(); err != nil {
		return nil, err
	}
	return merge(uint32(i), x0, units)
}

// members counts the offsets in [from, to) congruent to res mod 2^t and
// returns the first of them.
func members(res uint64, t int, from, to uint64) (count, first uint64) {
	step := uint64(1) << t
	firstAt := func(x uint64) uint64 { // the first member >= x
		if x <= res {
			return res
		}
		return res + (x-res+step-1)/step*step
	}
	f := firstAt(from)
	if f >= to {
		return 0, 0
	}
	return (to-1-f)/step + 1, f
}

// closed: every member above N0 of a closing class has stopping time t.
func (u *unit) closed(res uint64, t int) {
	n, first := members(res, t, u.from, u.to)
	if n == 0 {
		return
	}
	u.acc.count[cSieve] += n
	u.acc.addSigma(n, uint64(t))
	if n := u.acc.first[t]; !u.acc.hasFirst[t] || first < n {
		u.acc.first[t], u.acc.hasFirst[t] = first, true
	}
}

// survivor searches every member of the survivor class res mod 2^k,
// jumping k steps at once: T^k(2^k*q + res) = a^s*q + T^k(res).
func (u *unit) survivor(res uint64, s int, tk exact) {
	n, off := members(res, u.g.k, u.from, u.to)
	x := u.surv
	u.surv++
	if u.joined != nil && u.joined[x/64]>>(x%64)&1 == 1 {
		// A joined class: every member above N0 meets a smaller number
		// after k steps (SPEC.md, section 6).
		u.acc.count[cJoin] += n
		return
	}
	r, k, limit := u.g.r, u.g.k, u.g.p.Cap
	rules := len(u.g.p.Rules) > 0
	if u.fast && tk.b == nil && r.powFits[s] && r.jump != nil && u.g.lanes {
		if rules && u.g.masks != nil && u.x0u+off >= u.g.masks.minN {
			// The members the rules leave, 64 at a time from the masks.
			mk := u.g.masks
			rho := (u.x0modP + off%mk.p) % mk.p
			for q := uint64(0); q < n; q += 64 {
				valid := ^uint64(0)
				if n-q < 64 {
					valid = 1<<(n-q) - 1
				}
				any := uint64(0)
				for i, m := range mk.rule {
					hit := m[rho] & valid
					u.acc.rules[i] += uint64(bits.OnesCount64(hit))
					any |= hit
				}
				for left := valid &^ any; left != 0; left &= left - 1 {
					u.push(off+(q+uint64(bits.TrailingZeros64(left)))<<k, s, tk)
				}
				if rho += mk.step64; rho >= mk.p {
					rho -= mk.p
				}
			}
			return
		}
		if rules {
			u.ruleStart(off)
		}
		for ; n > 0; n, off = n-1, off+1<<k {
			if rules {
				if i := u.ruleNext(off); i >= 0 {
					u.acc.rules[i]++
					continue
				}
			}
			u.push(off, s, tk)
		}
		return
	}
	if rules {
		u.ruleStart(off)
	}
	for ; n > 0; n, off = n-1, off+1<<k {
		if rules {
			if i := u.ruleNext(off); i >= 0 {
				u.acc.rules[i]++
				continue
			}
		}
		var o outcome
		if u.fast && tk.b == nil && r.powFits[s] {
			num := u.x0u + off
			x, ok := r.powU[s].mul64(num >> k)
			if ok {
				x, ok = x.add(tk.u)
			}
			if ok {
				o = r.searchFrom(num, x, uint32(k), limit)
				u.acc.note(off, o, cSearch)
				continue
			}
		}
		num := new(big.Int).Add(u.x0, new(big.Int).SetUint64(off))
		u.acc.note(off, r.searchBig(num, u.jumpBig(num, s, tk), uint32(k), limit), cSearch)
	}
}

// push queues the member at offset off of a survivor class (s odd steps,
// tk = T^k of its residue) for the two-lane search, or searches it with
// math/big when the jump leaves 128 bits or the table's range.
func (u *unit) push(off uint64, s int, tk exact) {
	r, k := u.g.r, u.g.k
	num := u.x0u + off
	x, ok := r.powU[s].mul64(num >> k)
	if ok {
		x, ok = x.add(tk.u)
	}
	if !ok || x.hi >= r.jumpLim {
		u.acc.note(off, r.searchBig(new(big.Int).SetUint64(num), u.jumpBig(new(big.Int).SetUint64(num), s, tk), uint32(k), u.g.p.Cap), cSearch)
		return
	}
	u.jobs = append(u.jobs, jumpJob{n: num, hi: x.hi, lo: x.lo, i: uint32(k)})
	u.offs = append(u.offs, off)
	if len(u.jobs) == cap(u.jobs) {
		u.flush()
	}
}

// ruleMasks say which members of a survivor class the predecessor rules
// justify, 64 members at a time, without testing each: the rules' moduli
// are odd (powers of a), so n mod p, p the least common multiple of the
// moduli, runs through a fixed cycle as n steps by 2^k.
type ruleMasks struct {
	p      uint64
	step64 uint64     // 64*2^k mod p
	minN   uint64     // the masks hold for n >= minN: every rule's c is below it
	rule   [][]uint64 // rule[i][rho]: bit q says that rule i is the first to fit n + q*2^k, for n = rho mod p
}

// maxMaskModulus bounds p, for the table's size: rules*p words.
const maxMaskModulus = 1 << 16

// newRuleMasks builds the masks, or returns nil when p is too large.
func newRuleMasks(rules []cert.Rule, k int) *ruleMasks {
	p := uint64(1)
	for _, rule := range rules {
		g := p
		for b := rule.M; b != 0; g, b = b, g%b {
		}
		if p = p / g * rule.M; p > maxMaskModulus {
			return nil
		}
	}
	step := new(big.Int).Mod(new(big.Int).Lsh(big.NewInt(1), uint(k)), new(big.Int).SetUint64(p)).Uint64()
	mk := &ruleMasks{p: p, step64: 64 * step % p}
	for _, rule := range rules {
		mk.minN = max(mk.minN, rule.C)
		mk.rule = append(mk.rule, make([]uint64, p))
	}
	for rho := range p {
		x := rho
		for q := range uint64(64) {
			for i, rule := range rules {
				if x%rule.M == rule.C%rule.M {
					mk.rule[i][rho] |= 1 << q
					break
				}
			}
			if x += step; x >= p {
				x -= p
			}
		}
	}
	return mk
}

// searchBuf holds a unit's queue while it searches: one per worker at a
// time, not one per unit, since a block has thousands of units.
type searchBuf struct {
	jobs []jumpJob
	offs []uint64
}

var bufPool = sync.Pool{New: func() any {
	return &searchBuf{jobs: make([]jumpJob, 0, flushSize), offs: make([]uint64, 0, flushSize)}
}}

// flushSize is how many numbers a unit gathers for the two-lane search.
const flushSize = 1024

// flush searches the numbers gathered so far, two lanes at a time; the
// few the lanes hand back (cap or value limit) take the general path.
func (u *unit) flush() {
	r, limit := u.g.r, u.g.p.Cap
	searchJump2(r.jump, r.jumpLim, u.jobs, limit)
	for i := range u.jobs {
		j := &u.jobs[i]
		o := outcome{fate: cert.Descends, sigma: j.sigma}
		if j.sigma == 0 {
			o = r.searchFrom(j.n, u128{j.hi, j.lo}, j.i, limit)
		}
		u.acc.note(u.offs[i], o, cSearch)
	}
	u.jobs, u.offs = u.jobs[:0], u.offs[:0]
}

// jumpBig returns T^k(num) = a^s*(num >> k) + T^k(res), exactly.
func (u *unit) jumpBig(num *big.Int, s int, tk exact) *big.Int {
	x := new(big.Int).Rsh(num, uint(u.g.k))
	return x.Mul(x, u.g.r.powBig(s)).Add(x, tk.big())
}

// smallNumbers iterates the numbers at or below N0 directly.
func (u *unit) smallNumbers() {
	for off := u.from; off < u.to; off++ {
		n := new(big.Int).Add(u.x0, new(big.Int).SetUint64(off))
		u.acc.note(off, u.g.r.iterate(n, u.g.p.Cap), cSmall)
	}
}

const (
	cSieve = iota
	cJoin
	cSearch
	cSmall
	cCycle
	cUndecided
)

// acc accumulates a summary over offsets within one block.
type acc struct {
	count    [6]uint64
	rules    []uint64 // numbers justified by each predecessor rule
	sum      u128
	maxSigma uint32
	maxAt    uint64
	stairs   []point // staircase: increasing off and sigma
	first    []uint64
	hasFirst []bool
	cycles   map[string]*cycleAcc
	undec    []uint64
}

type point struct {
	off   uint64
	sigma uint32
}

type cycleAcc struct {
	min   *big.Int
	count uint64
}

func newAcc(k, rules int) acc {
	return acc{first: make([]uint64, k+1), hasFirst: make([]bool, k+1), cycles: map[string]*cycleAcc{}, rules: make([]uint64, rules)}
}

func (a *acc) addSigma(n, sigma uint64) {
	hi, lo := bits.Mul64(n, sigma)
	a.sum, _ = a.sum.add(u128{hi, lo}) // at most 2^62 numbers of stopping time < 2^24 per block
}

// note records the outcome of a number that was iterated.
func (a *acc) note(off uint64, o outcome, rule int) {
	switch o.fate {
	case cert.Descends:
		a.count[rule]++
		a.addSigma(1, uint64(o.sigma))
		a.point(off, o.sigma)
	case cert.Cycle:
		a.count[cCycle]++
		key := o.cycleMin.String()
		if c := a.cycles[key]; c != nil {
			c.count++
		} else {
			a.cycles[key] = &cycleAcc{min: o.cycleMin, count: 1}
		}
	default:
		a.count[cUndecided]++
		if len(a.undec) <= cert.MaxUndecided { // one more than a block may list: enough to refuse it
			a.undec = append(a.undec, off)
		}
	}
}

// point adds a number with its stopping time to the staircase of records
// and to the maximum.
func (a *acc) point(off uint64, sigma uint32) {
	if sigma > a.maxSigma || (sigma == a.maxSigma && off < a.maxAt) {
		a.maxSigma, a.maxAt = sigma, off
	}
	if len(a.stairs) > 0 && a.stairs[0].off < off && a.stairs[0].sigma >= sigma {
		return // the first record already dominates it, as it does most
	}
	// The records are the prefix maxima: (off, sigma) is one unless a
	// point before it has a stopping time at least as large.
	lo, hi := 0, len(a.stairs) // the first point at or after off
	for lo < hi {
		if m := (lo + hi) / 2; a.stairs[m].off < off {
			lo = m + 1
		} else {
			hi = m
		}
	}
	i := lo
	if i > 0 && a.stairs[i-1].sigma >= sigma {
		return
	}
	j := i
	for j < len(a.stairs) && a.stairs[j].sigma <= sigma {
		j++
	}
	a.stairs = append(a.stairs[:i], append([]point{{off, sigma}}, a.stairs[j:]...)...)
}

// merge adds up the units of block i into its record.
func merge(index uint32, x0 *big.Int, units []*unit) (*cert.Block, error) {
	total := newAcc(len(units[0].acc.first)-1, len(units[0].acc.rules))
	var pts []point
	for _, u := range units {
		a := &u.acc
		for c := range a.count {
			total.count[c] += a.count[c]
		}
		for i, c := range a.rules {
			total.rules[i] += c
		}
		total.sum, _ = total.sum.add(a.sum)
		pts = append(pts, a.stairs...)
		for t, ok := range a.hasFirst {
			if ok {
				pts = append(pts, point{a.first[t], uint32(t)})
			}
		}
		for key, c := range a.cycles {
			if m := total.cycles[key]; m != nil {
				m.count += c.count
			} else {
				total.cycles[key] = &cycleAcc{min: c.min, count: c.count}
			}
		}
		total.undec = append(total.undec, a.undec...)
	}
	sort.Slice(pts, func(i, j int) bool { return pts[i].off < pts[j].off })
	for _, p := range pts {
		total.point(p.off, p.sigma)
	}
	abs := func(off uint64) *big.Int { return new(big.Int).Add(x0, new(big.Int).SetUint64(off)) }
	b := &cert.Block{Index: index}
	s := &b.Summary
	counts := []**big.Int{&s.Sieve, &s.Join, &s.Search, &s.Small, &s.Cycle, &s.Undecided}
	for c, p := range counts {
		*p = new(big.Int).SetUint64(total.count[c])
	}
	s.Rules = []*big.Int{}
	for _, c := range total.rules {
		s.Rules = append(s.Rules, new(big.Int).SetUint64(c))
	}
	s.SigmaSum = total.sum.big()
	if total.maxSigma > 0 {
		s.MaxSigma, s.MaxAt = total.maxSigma, abs(total.maxAt)
	}
	for _, p := range total.stairs {
		s.Records = append(s.Records, cert.Point{N: abs(p.off), Sigma: p.sigma})
	}
	for _, c := range total.cycles {
		s.Cycles = append(s.Cycles, cert.CycleCount{Min: c.min, Count: new(big.Int).SetUint64(c.count)})
	}
	sort.Slice(s.Cycles, func(i, j int) bool { return s.Cycles[i].Min.Cmp(s.Cycles[j].Min) < 0 })
	sort.Slice(total.undec, func(i, j int) bool { return total.undec[i] < total.undec[j] })
	if total.count[cUndecided] > cert.MaxUndecided {
		return nil, fmt.Errorf("block %d has %d undecided numbers, more than a block may list (%d): raise -cap or use smaller blocks",
			index, total.count[cUndecided], cert.MaxUndecided)
	}
	for _, off := range total.undec {
		b.UndecidedNs = append(b.UndecidedNs, abs(off))
	}
	return b, nil
}

// totals sums block summaries into the header's: records and the maximum
// are taken in block order, so the first of equals wins.
func totals(blocks []*cert.Block, rules int) cert.Summary {
	s := zeroSummary(rules)
	cycles := map[string]*cert.CycleCount{}
	for _, b := range blocks {
		for _, pair := range [][2]*big.Int{{s.Sieve, b.Sieve}, {s.Join, b.Join}, {s.Search, b.Search}, {s.Small, b.Small},
			{s.Cycle, b.Cycle}, {s.Undecided, b.Undecided}, {s.SigmaSum, b.SigmaSum}} {
			pair[0].Add(pair[0], pair[1])
		}
		for i, c := range b.Rules {
			s.Rules[i].Add(s.Rules[i], c)
		}
		if b.MaxSigma > s.MaxSigma {
			s.MaxSigma, s.MaxAt = b.MaxSigma, b.MaxAt
		}
		for _, p := range b.Records {
			if len(s.Records) == 0 || p.Sigma > s.Records[len(s.Records)-1].Sigma {
				s.Records = append(s.Records, p)
			}
		}
		for _, c := range b.Cycles {
			key := c.Min.String()
			if m := cycles[key]; m != nil {
				m.Count.Add(m.Count, c.Count)
			} else {
				cycles[key] = &cert.CycleCount{Min: c.Min, Count: new(big.Int).Set(c.Count)}
			}
		}
	}
	for _, c := range cycles {
		s.Cycles = append(s.Cycles, *c)
	}
	sort.Slice(s.Cycles, func(i, j int) bool { return s.Cycles[i].Min.Cmp(s.Cycles[j].Min) < 0 })
	return s
}
