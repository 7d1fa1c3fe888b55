package emit

import (
	"math/big"
	"math/bits"

	"descent/cert"
)

// exact is an exact non-negative integer: u when b is nil, else b.
type exact struct {
	u u128
	b *big.Int
}

func (x exact) big() *big.Int {
	if x.b != nil {
		return x.b
	}
	return x.u.big()
}

func (x exact) odd() bool {
	if x.b != nil {
		return x.b.Bit(0) == 1
	}
	return x.u.lo&1 == 1
}

// step returns T(x), exactly.
func (r *rules) stepExact(x exact) exact {
	if x.b == nil {
		if !x.odd() {
			return exact{u: x.u.rsh1()}
		}
		if y, ok := x.u.mul64(r.a); ok {
			if y, ok = y.addSigned(int64(r.m.B)); ok {
				return exact{u: y.rsh1()}
			}
		}
	}
	z := new(big.Int).Set(x.big())
	r.step(z)
	if u, ok := toU128(z); ok {
		return exact{u: u}
	}
	return exact{b: z}
}

// plusPow returns x + a^s.
func (r *rules) plusPow(x exact, s int) exact {
	if x.b == nil && r.powFits[s] {
		if y, ok := x.u.add(r.powU[s]); ok {
			return exact{u: y}
		}
	}
	return exact{b: new(big.Int).Add(x.big(), r.powBig(s))}
}

func (r *rules) powBig(s int) *big.Int {
	return new(big.Int).Exp(r.bigA, big.NewInt(int64(s)), nil)
}

// leafVisitor receives the leaves of the trie below a class, with exact
// values: a closing class r mod 2^t, or a survivor r mod 2^k with s odd
// steps and tk = T^k(r).
type leafVisitor interface {
	closed(res uint64, t int)
	survivor(res uint64, s int, tk exact)
}

// leaves walks the classes below the open class res mod 2^t (s odd steps,
// v = T^t(res)) down to depth end, exactly.
func (r *rules) leaves(t, s int, v exact, res uint64, end int, lv leafVisitor) {
	for t < end {
		even := uint64(0)
		if v.odd() {
			even = 1 // the child whose value is v + a^s is the even one
		}
		if r.closes(t+1, s) {
			lv.closed(res|even<<t, t+1)
			if even == 1 { // go on into child 0, value v, odd step
				v = r.stepExact(v)
			} else {
				v = r.stepExact(r.plusPow(v, s))
				res |= 1 << t
			}
			s++
			t++
			continue
		}
		c0 := r.stepExact(v)
		s0 := s
		if v.odd() {
			s0++
		}
		r.leaves(t+1, s0, c0, res, end, lv)
		v = r.plusPow(v, s)
		if v.odd() {
			s++
		}
		v = r.stepExact(v)
		res |= 1 << t
		t++
	}
	if end == r.j {
		lv.survivor(res, s, v)
	}
}

// stubStart follows the stub res mod 2^d from the root, exactly.
func (r *rules) stubStart(res uint64, d int) (int, exact) {
	v, s := exact{u: u128{0, res}}, 0
	for range d {
		if v.odd() {
			s++
		}
		v = r.stepExact(v)
	}
	return s, v
}

// smallBound is N0 (SPEC.md, "The small bound"): above it, a member of a
// class that closes at t has stopping time exactly t, and a survivor does
// not drop within k steps. Numbers up to it are iterated directly.
//
// For b > 0 every prefix has c >= 0, so T^i(n) >= n while a class is open,
// and N0 is the exception bound. For b < 0 there are no exceptions, but
// T^i(n) < n can happen early for small n: with an open prefix of i steps
// and s odd ones, |c| <= s*|b|*a^s/2, so it needs n < s*|b|*a^s/(2(a^s-2^i));
// the largest i at which s odd steps are still open is one below the bit
// length of a^s, or k.
func (r *rules) smallBound() *big.Int {
	if r.m.B > 0 {
		return r.exceptionBound()
	}
	best := new(big.Int)
	absB := big.NewInt(-int64(r.m.B))
	p := big.NewInt(1)
	for s := 1; s <= r.k; s++ {
		p.Mul(p, r.bigA)
		i := min(p.BitLen()-1, r.k)
		num := new(big.Int).Mul(p, big.NewInt(int64(s)))
		num.Mul(num, absB)
		den := new(big.Int).Sub(p, new(big.Int).Lsh(big.NewInt(1), uint(i)))
		den.Lsh(den, 1)
		if q := num.Quo(num, den); q.Cmp(best) > 0 {
			best = q
		}
	}
	return best
}

// outcome is what iteration found for one number.
type outcome struct {
	fate     cert.FateKind
	sigma    uint32   // Descends: the stopping time
	cycleMin *big.Int // Cycle
}

// iterate decides n by direct iteration, as fate does, returning the
// stopping time rather than a descent count.
func (r *rules) iterate(n *big.Int, cap uint32) outcome {
	e := r.fate(n, cap)
	return outcome{fate: e.Fate, sigma: e.Steps, cycleMin: e.CycleMin}
}

// searchFrom finishes the search of n from x = T^i(n): it steps on until
// the value drops below n, up to the cap; past the cap it decides n by
// direct iteration. n < 2^64; x is exact in 128 bits, and the loop leaves
// for math/big before a step could exceed them.
//
// For odd x and odd b, (a*x + b)/2 = (x >> 1) + x*(a-1)/2 + (b+1)/2; a mask
// made from the parity selects the second part, so the loop has no branch
// on the parity, which is as unpredictable as a coin.
func (r *rules) searchFrom(n uint64, x u128, i uint32, cap uint32) outcome {
	if r.jump != nil && x.hi < r.jumpLim {
		if sigma := searchJump(r.jump, r.jumpLim, n, x.hi, x.lo, i, cap); sigma > 0 {
			return outcome{fate: cert.Descends, sigma: sigma}
		}
	}
	hi, lo := x.hi, x.lo
	half := (r.a - 1) / 2
	inc := uint64(int64(r.m.B)+1) / 2
	if r.m.B < 0 {
		inc = -uint64((-int64(r.m.B) - 1) / 2) // (b+1)/2 <= 0, in two's complement
	}
	incHi := uint64(0)
	if r.m.B < -1 {
		incHi = ^uint64(0)
	}
	for ; i < cap; i++ {
		if hi == 0 && lo < n {
			return outcome{fate: cert.Descends, sigma: i}
		}
		if hi >= r.limHi {
			return r.searchBig(new(big.Int).SetUint64(n), u128{hi, lo}.big(), i, cap)
		}
		odd := -(lo & 1)
		var th, tl uint64
		if half == 1 {
			th, tl = hi, lo
		} else {
			th, tl = bits.Mul64(lo, half)
			th += hi * half
		}
		var c uint64
		tl, c = bits.Add64(tl, inc, 0)
		th += incHi + c
		lo, c = bits.Add64(lo>>1|hi<<63, tl&odd, 0)
		hi = hi>>1 + th&odd + c
	}
	if hi == 0 && lo < n {
		return outcome{fate: cert.Descends, sigma: i}
	}
	return r.iterate(new(big.Int).SetUint64(n), cap)
}

// searchBig is searchFrom with math/big, for n or values beyond 128 bits.
// An iterate at the ceiling stops it, undecided (the fast paths never see
// one: their values stay below 2^128 <= 2^W).
func (r *rules) searchBig(n, x *big.Int, i uint32, cap uint32) outcome {
	x = new(big.Int).Set(x)
	for ; i <= cap; i++ {
		if x.Cmp(n) < 0 {
			return outcome{fate: cert.Descends, sigma: i}
		}
		if x.BitLen() > r.ceiling {
			return outcome{fate: cert.Undecided}
		}
		if r.step(x); !r.work.charge(x) {
			return outcome{fate: cert.Undecided}
		}
	}
	return r.iterate(n, cap)
}
