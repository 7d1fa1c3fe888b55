package emit

import (
	"math/big"
	"sort"

	"descent/cert"
)

// Predecessor rules (SPEC.md, section 9). A residue c' mod 2^i whose first
// i steps have s odd ones gives, for every q >= 0,
//
//	T^i(2^i*q + c') = a^s*q + T^i(c'),
//
// so the numbers n = a^s*q + T^i(c') have the predecessor m = 2^i*q + c',
// which is smaller for every q when 2^i <= a^s and c' < T^i(c'). For 3n+1,
// i = 1, c' = 1 gives n = 3q + 2 (m = 2q + 1), and i = 3, c' = 3 gives
// n = 9q + 4 (m = 8q + 3, through 12q + 5 and 18q + 8).

// AutoRuleSteps is the longest predecessor path AutoRules tries.
const AutoRuleSteps = 6

// AutoRules returns the predecessor rules for m with paths of at most
// AutoRuleSteps steps (and c' < 2^(i+1)), widest first, leaving out every
// rule whose numbers an earlier rule already covers.
func AutoRules(m cert.Map) []cert.Rule {
	a, b := big.NewInt(int64(m.A)), big.NewInt(int64(m.B))
	var cands []cert.Rule
	for i := 1; i <= AutoRuleSteps; i++ {
		for c := uint64(1); c < 2<<i; c++ { // c' >= 2^i too: the class starts higher
			v, s := new(big.Int).SetUint64(c), 0
			for range i {
				if v.Bit(0) == 1 {
					v.Mul(v, a).Add(v, b)
					s++
				}
				v.Rsh(v, 1)
			}
			M := new(big.Int).Exp(a, big.NewInt(int64(s)), nil)
			if M.Cmp(big.NewInt(1<<i)) < 0 || !v.IsUint64() || v.Uint64() <= c || M.BitLen() > 62 || v.BitLen() > 62 {
				continue
			}
			cands = append(cands, cert.Rule{M: M.Uint64(), C: v.Uint64(), Mp: 1 << i, Cp: c, Steps: i})
		}
	}
	sort.SliceStable(cands, func(x, y int) bool {
		if cands[x].M != cands[y].M {
			return cands[x].M < cands[y].M
		}
		return cands[x].C < cands[y].C
	})
	var out []cert.Rule
	for _, r := range cands {
		covered := false
		for _, o := range out {
			// {C + M*q} lies inside {o.C + o.M*q} when o.M divides M, the
			// classes agree mod o.M and the first member is not below o.C.
			if r.M%o.M == 0 && r.C%o.M == o.C%o.M && r.C >= o.C {
				covered = true
				break
			}
		}
		if !covered && r.Prove(m) == nil {
			out = append(out, r)
		}
		if len(out) == cert.MaxRules {
			break
		}
	}
	return out
}
