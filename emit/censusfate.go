package emit

import (
	"math/big"
	"math/bits"
	"sync"
	"sync/atomic"

	"descent/cert"
)

// The census fate of a number n (SPEC.md, section 12): follow x_i = T^i(n)
// to the first index d at which x_d is the smallest member of a cycle. n is
// decided when d <= C, the cycle's period is at most C, and every value of
// the orbit is below 2^W; it then has the delay d + h in standard steps (h
// the odd steps among x_0 .. x_(d-1), its height) and a peak, the largest
// value of its standard trajectory up to x_d.
//
// Two ways compute it here. The exact path (exactFate) follows the orbit
// with math/big, recognising the smallest members of the cycles found so
// far, and otherwise finds the orbit's cycle by Brent's method (a checker
// uses the constant-memory passes of the spec instead). The fast path
// follows n in 64 and 128 bits until it falls below a bound and reads the
// rest from a memo of smaller numbers; every operation that could exceed
// 128 bits, every orbit that does not fall, and every memo entry that
// cannot hold its number's fate hands the number to the exact path. The
// memo is a cache: its size never changes a byte of the output.

// fate is what the census states about one number.
type fate struct {
	decided bool
	cyc     int    // the cycle reached: an index into the censor's registry
	d, h    uint64 // steps of T to the cycle's smallest member, and the odd ones among them
	peak    *big.Int
}

// cycleInfo is a cycle found by the exact path, with its period and
// members within the census's bounds: its smallest member.
type cycleInfo struct {
	min *big.Int
}

// cycleRegistry holds the cycles found so far. Readers take a snapshot
// without locking; the list only grows.
type cycleRegistry struct {
	mu   sync.Mutex
	list atomic.Pointer[[]cycleInfo]
}

func (r *cycleRegistry) snapshot() []cycleInfo {
	if p := r.list.Load(); p != nil {
		return *p
	}
	return nil
}

// add registers a cycle, if new, and returns its index.
func (r *cycleRegistry) add(min *big.Int) int {
	r.mu.Lock()
	defer r.mu.Unlock()
	cur := r.snapshot()
	for i, c := range cur {
		if c.min.Cmp(min) == 0 {
			return i
		}
	}
	next := append(append([]cycleInfo{}, cur...), cycleInfo{min: new(big.Int).Set(min)})
	r.list.Store(&next)
	return len(next) - 1
}

// censor computes census fates for one map, cap and ceiling.
type censor struct {
	m       cert.Map
	a       uint64
	b       int64
	bigA    *big.Int
	bigB    *big.Int
	cap     uint64
	ceiling int
	cycles  cycleRegistry
	work    *meter

	// The memo: an entry for every x < smallN, and for every odd x in
	// [smallN, bound).
	smallN, bound uint64
	mem           []uint32 // the entries of x < smallN, then of the odd x >= smallN (index)
	r4            uint64   // for 3n+b, the odd class mod 4 whose step is followed by a halving: 3r + b = 0 mod 4; else 4
	lim64         uint64   // a*x + b fits 64 bits for odd x <= lim64
	jump          []censusJumpEntry
	jumpMin       uint64 // down jumps from x >= jumpMin (setJumpMin)
	limHi         uint64 // a*x + b fits 128 bits while x>>64 < limHi
}

// Memo entries: d+1 in bits 0..11 (0: not held, the number takes the exact
// path; 4095: undecided), h in bits 12..22, in bits 23..29 a bound on the
// peak's bit length (the peak is below 2^bound; 127: no bound), the cycle
// in bits 30..31.
const (
	eDMax       = 4093 // the largest d an entry holds
	eUndecided  = 4095
	eHMax       = 1<<11 - 1
	ePeakBitsOK = 127 // bounds below it are kept
	eCycles     = 4
)

func packEntry(f fate, peakBits int) uint32 {
	if !f.decided {
		return eUndecided
	}
	if f.d > eDMax || f.h > eHMax || f.cyc >= eCycles {
		return 0
	}
	return uint32(f.d+1) | uint32(f.h)<<12 | uint32(min(peakBits, ePeakBitsOK))<<23 | uint32(f.cyc)<<30
}

// newCensor makes a censor whose memo will hold every x below smallN and
// every odd x above.
func newCensor(m cert.Map, cap uint32, ceiling int, work *meter, smallN uint64) *censor {
	c := &censor{m: m, a: uint64(m.A), b: int64(m.B), bigA: big.NewInt(int64(m.A)), bigB: big.NewInt(int64(m.B)),
		cap: uint64(cap), ceiling: ceiling, work: work, smallN: smallN}
	pos := uint64(max(c.b, 0))
	c.lim64 = (^uint64(0) - pos) / c.a
	c.limHi = ^uint64(0)/c.a - 1
	c.jump = censusJumpTable(m)
	c.setJumpMin()
	c.r4 = 4 // no class mod 4 is 4
	if c.a == 3 {
		if (3+c.b)&3 == 0 {
			c.r4 = 1
		} else {
			c.r4 = 3
		}
	}
	return c
}

// allocMemo sizes the memo for the numbers below bound, a power of two at
// least smallN.
func (c *censor) allocMemo(bound uint64) {
	c.bound = bound
	c.mem = make([]uint32, c.smallN+bound>>1+1)
}

// stored says whether the memo holds an entry of its own for x.
func (c *censor) stored(x uint64) bool {
	if x < c.smallN {
		return true
	}
	return x&1 == 1
}

func (c *censor) put(x uint64, e uint32) { c.mem[c.index(x)] = e }

// stepBig replaces x by T(x), raising peak to a*x + b on an odd step, and
// reports whether the step was odd.
func (c *censor) stepBig(x, peak *big.Int) bool {
	if x.Bit(0) == 0 {
		x.Rsh(x, 1)
		return false
	}
	x.Mul(x, c.bigA).Add(x, c.bigB)
	if peak != nil && x.Cmp(peak) > 0 {
		peak.Set(x)
	}
	x.Rsh(x, 1)
	return true
}

// exactFate decides n with math/big alone (SPEC.md, section 12, "Fates").
// It follows the orbit, stopping at the smallest member of a cycle already
// found: the first such value is the first smallest member of any cycle (a
// smallest member met earlier would have put the orbit on its cycle, whose
// smallest member is unique). Otherwise Brent's method finds the orbit's
// cycle: a value kept at each index 2^k is met again after one period. If
// n is decided, its orbit repeats from index d <= C with period p <= C, and
// the kept value after the first 2^k >= max(d, p) is met again by index
// 2^k + p < 3C; so 3C steps without a repeat, or a value of 2^W or more
// (which never occurs in the orbit of a decided number), leave it
// undecided.
func (c *censor) exactFate(n *big.Int) fate {
	known := c.cycles.snapshot()
	x, peak := new(big.Int).Set(n), new(big.Int).Set(n)
	kept, keptAt, next := new(big.Int).Set(n), uint64(0), uint64(1)
	var h uint64
	for i := uint64(0); i <= 3*c.cap; i++ {
		if x.BitLen() > c.ceiling {
			return fate{}
		}
		for id, cy := range known {
			if x.Cmp(cy.min) == 0 {
				if i > c.cap {
					return fate{}
				}
				return fate{decided: true, cyc: id, d: i, h: h, peak: peak}
			}
		}
		if i > keptAt && x.Cmp(kept) == 0 {
			return c.settle(n, kept, i-keptAt)
		}
		if i == next {
			kept.Set(x)
			keptAt, next = i, 2*next
		}
		if !c.work.charge(x) {
			return fate{}
		}
		if c.stepBig(x, peak) {
			h++
		}
	}
	return fate{}
}

// settle decides n, whose orbit goes round the cycle through y of period
// p: the cycle's smallest member m, the first index d of m in the orbit,
// and n is decided iff d <= C and p <= C.
func (c *censor) settle(n, y *big.Int, p uint64) fate {
	if p > c.cap {
		return fate{}
	}
	z, m := new(big.Int).Set(y), new(big.Int).Set(y)
	for range p {
		c.stepBig(z, nil)
		if z.Cmp(m) < 0 {
			m.Set(z)
		}
	}
	x, peak := new(big.Int).Set(n), new(big.Int).Set(n)
	var d, h uint64
	for ; x.Cmp(m) != 0; d++ {
		if d == c.cap || !c.work.charge(x) {
			return fate{}
		}
		if c.stepBig(x, peak) {
			h++
		}
	}
	return fate{decided: true, cyc: c.cycles.add(m), d: d, h: h, peak: peak}
}

// peakOf returns the peak of n, which reaches its cycle's smallest member
// after d steps: the largest of n and every a*x + b on the way, exactly.
func (c *censor) peakOf(n *big.Int, d uint64) *big.Int {
	if n.IsUint64() {
		x := u128{0, n.Uint64()}
		peak := x
		var i uint64
		for ; i < d && x.hi < c.limHi; i++ {
			if x.lo&1 == 0 {
				x = x.rsh1()
				continue
			}
			y, _ := x.mul64(c.a)
			y, ok := y.addSigned(c.b)
			if !ok {
				break
			}
			if peak.less(y) {
				peak = y
			}
			x = y.rsh1()
		}
		if i == d {
			return peak.big()
		}
		p, big := peak.big(), x.big()
		for ; i < d; i++ {
			c.stepBig(big, p)
		}
		return p
	}
	x, peak := new(big.Int).Set(n), new(big.Int).Set(n)
	for i := uint64(0); i < d; i++ {
		c.stepBig(x, peak)
	}
	return peak
}

// u128 compare helpers for the fast path.
func maxU128(x, y u128) u128 {
	if x.less(y) {
		return y
	}
	return x
}

func (x u128) bitLen() int {
	if x.hi != 0 {
		return 64 + bits.Len64(x.hi)
	}
	return bits.Len64(x.lo)
}

// down follows n from x = n until x < floor, in 64 bits and then 128,
// counting the steps d and the odd ones h and keeping the largest a*x + b
// (and n) in peak. It fails (ok false) when a value would pass 128 bits or
// the steps pass limit: the exact path then takes n. A run of halvings is
// taken at once, so x may fall well below floor; no value passed over is
// the smallest member of a cycle (an even number never is: half of it lies
// on its cycle too), and the orbit fell below floor, which the orbit of a
// smallest member at or above floor never does.
//
// Where x >= jumpMin, it takes censusJumpBits steps at once by the table
// (see censusJumpTable); the peak is then an upper bound, never below the true
// one, which is all the memo and the search for path records need of it.
func (c *censor) down(n, floor, limit uint64) (x uint64, d, h uint64, peak u128, ok bool) {
	x = n
	pk := n
	am1, b := c.a-1, uint64(c.b)
	for x >= floor {
		if x >= c.jumpMin && d <= limit {
			e := &c.jump[x&(1<<censusJumpBits-1)]
			q := x >> censusJumpBits
			hi, lo := bits.Mul64(q, e.mul)
			lo, carry := bits.Add64(lo, e.add, 0)
			phi, plo := bits.Mul64(q, e.peakM)
			plo, pcarry := bits.Add64(plo, e.peakD, 0)
			if hi|carry|phi|pcarry == 0 && plo < 1<<63 {
				x = lo
				d += censusJumpBits
				h += e.odd
				pk = max(pk, 2*plo)
				continue
			}
		}
		// Without a branch on the parity, which is as unpredictable as a
		// coin: y = a*x + b for odd x, x for even x; then every halving
		// at once.
		if x > c.lim64 || d > limit {
			return c.down128(u128{0, x}, floor, limit, d, h, u128{0, pk})
		}
		odd := x & 1
		y := x + (x*am1+b)&-odd
		if y > pk {
			pk = y
		}
		tz := uint64(bits.TrailingZeros64(y))
		x = y >> tz
		d += tz
		h += odd
	}
	return x, d, h, u128{0, pk}, true
}

func (c *censor) down128(x u128, floor, limit, d, h uint64, pk u128) (uint64, uint64, uint64, u128, bool) {
	for x.hi != 0 || x.lo >= floor {
		if d > limit {
			return 0, 0, 0, u128{}, false
		}
		if x.lo&1 == 0 {
			tz := uint64(bits.TrailingZeros64(x.lo))
			if x.lo == 0 {
				tz = 64
			}
			x = u128{x.hi >> tz, x.lo>>tz | x.hi<<(64-tz)}
			if tz == 64 {
				x = u128{0, x.hi}
			}
			d += tz
			continue
		}
		if x.hi >= c.limHi {
			return 0, 0, 0, u128{}, false
		}
		y, _ := x.mul64(c.a)
		y, ok := y.addSigned(c.b)
		if !ok {
			return 0, 0, 0, u128{}, false
		}
		pk = maxU128(pk, y)
		x = y.rsh1()
		d++
		h++
	}
	return x.lo, d, h, pk, true
}

// land follows n until it falls below floor (n < floor: n itself) and
// its odd part, and returns the index of the memo entry it lands on, with
// the steps, odd steps and peak so far. ok is false when the exact path
// must take n. The entry is read apart (see censusRun.run), so that the
// reads of many numbers overlap.
//
// Two cases end at once and are told apart by n mod 4, which the
// processor predicts as n counts up: an even n below 2*floor, whose half
// is below floor, and for 3n+b an odd n of the class r4 mod 4, whose
// step 3n+b is divisible by 4, when (3n+b)/4 is below floor. Every other
// n takes the loop of down.
func (c *censor) land(n, floor uint64) (idx, d, h uint64, pk u128, ok bool) {
	x := n
	pk = u128{0, n}
	switch {
	case n < floor, n&1 == 0 && n>>1 < floor:
	case n&3 == c.r4 && n <= c.lim64 && (3*n+uint64(c.b))>>2 < floor:
		x = 3*n + uint64(c.b)
		pk = u128{0, x}
		h = 1
	default:
		if x, d, h, pk, ok = c.down(n, floor, min(c.cap, 1<<16)); !ok {
			return 0, 0, 0, u128{}, false
		}
	}
	tz := uint64(bits.TrailingZeros64(x)) // x >= 1
	x >>= tz
	d += tz
	return c.index(x), d, h, pk, true
}

// censusJumpBits is the number of steps the table of down takes at once.
const censusJumpBits = 10

// censusJumpEntry is what k = censusJumpBits steps do to every x = 2^k*q + r,
// by the identity T^i(2^k*q + r) = 2^(k-i)*a^(s_i)*q + T^i(r), i <= k, s_i
// the odd steps among the first i of r (SPEC.md, section 1): T^k(x) =
// mul*q + add, with odd of the k steps odd, and every T^i(x) at most
// peakM*q + peakD; so every value of the standard trajectory over the k
// steps (x, and a*T^i(x) + b = 2*T^(i+1)(x) on an odd step) is at most
// 2*(peakM*q + peakD).
type censusJumpEntry struct {
	mul, add     uint64
	peakM, peakD uint64
	odd          uint64
}

// censusJumpTable builds the table, or returns nil when an entry does not fit
// 64 bits (a large multiplier).
func censusJumpTable(m cert.Map) []censusJumpEntry {
	const k = censusJumpBits
	a, b := big.NewInt(int64(m.A)), big.NewInt(int64(m.B))
	fits := func(x *big.Int) bool { return x.Sign() >= 0 && x.BitLen() <= 62 }
	t := make([]censusJumpEntry, 1<<k)
	for r := range t {
		x, pow, s := big.NewInt(int64(r)), big.NewInt(1), uint64(0)
		peakM, peakD := new(big.Int).Lsh(big.NewInt(1), k), big.NewInt(int64(r))
		for i := 1; i <= k; i++ {
			if x.Bit(0) == 1 {
				x.Mul(x, a).Add(x, b)
				pow.Mul(pow, a)
				s++
			}
			x.Rsh(x, 1)
			if f := new(big.Int).Lsh(pow, uint(k-i)); f.Cmp(peakM) > 0 {
				peakM = f
			}
			if x.Cmp(peakD) > 0 {
				peakD = new(big.Int).Set(x)
			}
		}
		if !fits(pow) || !fits(x) || !fits(peakM) || !fits(peakD) {
			return nil
		}
		t[r] = censusJumpEntry{mul: pow.Uint64(), add: x.Uint64(), peakM: peakM.Uint64(), peakD: peakD.Uint64(), odd: s}
	}
	return t
}

// setJumpMin lets down jump from the numbers above 2^k times the largest
// smallest member of a cycle found so far. A jump passes over values
// without looking at them, and by "Fates" the orbit must not pass over
// the smallest member of a cycle before it lands on the memo: every value
// within k steps of x is above x/2^k, so above every such member found;
// and when it is called, every smallest member below the floor of the
// numbers to follow has been found, since the memo has an entry, decided
// by the exact path, for each (a smallest member never falls below
// itself). A smallest member at or above the floor is never passed over
// either: the orbit lands below the floor, and the orbit of a smallest
// member never goes below it.
func (c *censor) setJumpMin() {
	c.jumpMin = ^uint64(0)
	if c.jump == nil {
		return
	}
	most := new(big.Int)
	for _, cy := range c.cycles.snapshot() {
		if cy.min.Cmp(most) > 0 {
			most = cy.min
		}
	}
	if m := new(big.Int).Add(most, big.NewInt(1)); m.BitLen()+censusJumpBits < 64 {
		c.jumpMin = m.Uint64() << censusJumpBits
	}
}

// index is where the memo keeps the entry of a stored x.
func (c *censor) index(x uint64) uint64 {
	if x < c.smallN {
		return x
	}
	return c.smallN + x>>1
}

// combine finishes a number that landed on entry e after d steps, h of
// them odd, with a bound pk on the peak so far. It returns the fate (with
// the peak left nil) and a bound on the peak's bit length, or peakUnknown.
// ok is false when the entry does not hold its number's fate: the exact
// path must take n.
func (c *censor) combine(e uint32, d, h uint64, pk u128) (f fate, peakBits int, ok bool) {
	switch e & 0xfff {
	case 0:
		return fate{}, 0, false
	case eUndecided:
		return fate{}, 0, true // the orbit meets an undecided number's
	}
	d += uint64(e&0xfff) - 1
	h += uint64(e >> 12 & 0x7ff)
	if d > c.cap {
		return fate{}, 0, true
	}
	pb := int(e >> 23 & 0x7f)
	if pb >= ePeakBitsOK {
		pb = peakUnknown
	}
	return fate{decided: true, cyc: int(e >> 30), d: d, h: h}, max(pk.bitLen(), pb), true
}

// fastFate decides n < 2^64 by falling below floor and reading the memo.
func (c *censor) fastFate(n, floor uint64) (f fate, peakBits int, ok bool) {
	idx, d, h, pk, ok := c.land(n, floor)
	if !ok {
		return fate{}, 0, false
	}
	return c.combine(c.mem[idx], d, h, pk)
}

// peakUnknown stands for the bit length of a peak the memo does not bound:
// every such number may be a path record, and its peak is worked out.
const peakUnknown = 1 << 30

// fillSmall computes the memo entries of every x < smallN in increasing
// order: x falls below itself, onto an entry already made, or takes the
// exact path.
func (c *censor) fillSmall() error {
	for x := uint64(1); x < c.smallN; x++ {
		if x&4095 == 0 {
			if err := c.work.failed(); err != nil {
				return err
			}
			if c.work != nil && c.work.ctx != nil && c.work.ctx.Err() != nil {
				return c.work.ctx.Err()
			}
		}
		f, pb, ok := c.fastFate(x, x)
		if !ok {
			f = c.exactFate(new(big.Int).SetUint64(x))
			if f.decided {
				pb = f.peak.BitLen()
			}
			c.setJumpMin() // it may have found a cycle
		}
		c.mem[x] = packEntry(f, pb)
	}
	return c.work.failed()
}
