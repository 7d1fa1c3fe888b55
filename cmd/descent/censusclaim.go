package main

import (
	"fmt"
	"math/big"
	"sort"
	"strconv"
	"strings"

	"descent/cert"
)

// censusFacts is the claim of a census certificate: from its header as
// written (show, emit: censusFactsFromHeader), or from what a checker has
// re-derived (check, which fills the same fields). The words and the JSON
// are made from it here, once for all of them.
type censusFacts struct {
	Map         string
	Lo, Hi      string // decimal
	E           int    // blocks of 2^E numbers
	Blocks      int
	Cap         uint32 // C, in steps of T
	Ceiling     int    // W, in bits
	Cycles      []censusCycle
	Undecided   uint64   // how many numbers are undecided
	UndecidedNs []string // which, in increasing order; nil when not read
}

// censusCycle is what the census states about the numbers that reach one
// cycle, named by its smallest member.
type censusCycle struct {
	Min          string
	Table        []censusEntry // increasing in delay, then height
	First        []censusFirst // increasing in delay
	DelayRecords []censusDelayRecord
	PathRecords  []censusPathRecord
}

// censusEntry counts the numbers with one delay and height.
type censusEntry struct {
	Delay, Height, Count uint64
}

// censusFirst is the first number with a delay.
type censusFirst struct {
	Delay uint64
	N     string
}

type censusDelayRecord struct {
	N     string
	Delay uint64
}

type censusPathRecord struct {
	N, Peak string
}

// censusCheckable says whether this build's 'descent check' re-derives
// census certificates; the words about what re-derives the claim follow it.
const censusCheckable = false

// censusNotCheckable says on stderr, for a census certificate or a shard
// of one, that this build cannot check it, rather than calling a good file
// malformed.
func (c *cli) censusNotCheckable(path string) bool {
	if censusCheckable {
		return false
	}
	if _, whole, ok, _ := certKind(path); ok && whole == cert.KindCensus {
		c.errorf("check: %s is a census certificate; this version of descent cannot check census certificates yet", path)
		c.hintf("'descent show %s' prints its claim as written, which nothing has re-derived", path)
		return true
	}
	return false
}

func censusFactsFromHeader(h *cert.CensusHeader, undecided []*big.Int) censusFacts {
	f := censusFacts{Map: h.Map.String(), Lo: h.Lo.String(), Hi: h.Hi.String(), E: h.E, Blocks: h.Blocks, Cap: h.Cap,
		Ceiling: h.Ceiling, Undecided: h.Totals.Undecided}
	for _, c := range h.Totals.Cycles {
		cc := censusCycle{Min: c.Min.String()}
		for _, g := range c.Groups {
			cc.First = append(cc.First, censusFirst{Delay: g.Delay, N: g.First.String()})
			for _, e := range g.Heights {
				cc.Table = append(cc.Table, censusEntry{Delay: g.Delay, Height: e.Height, Count: e.Count})
			}
		}
		for _, r := range c.DelayRecords {
			cc.DelayRecords = append(cc.DelayRecords, censusDelayRecord{N: r.N.String(), Delay: r.Delay})
		}
		for _, r := range c.PathRecords {
			cc.PathRecords = append(cc.PathRecords, censusPathRecord{N: r.N.String(), Peak: r.Peak.String()})
		}
		f.Cycles = append(f.Cycles, cc)
	}
	if undecided != nil {
		f.UndecidedNs = []string{}
		for _, n := range undecided {
			f.UndecidedNs = append(f.UndecidedNs, n.String())
		}
	}
	return f
}

// numbers is hi - lo, as a decimal.
func (f censusFacts) numbers() string {
	lo, _ := new(big.Int).SetString(f.Lo, 10)
	hi, _ := new(big.Int).SetString(f.Hi, 10)
	if lo == nil || hi == nil {
		return "?"
	}
	return hi.Sub(hi, lo).String()
}

// count is how many numbers reach the cycle.
func (c censusCycle) count() uint64 {
	var n uint64
	for _, e := range c.Table {
		n += e.Count
	}
	return n
}

func (f censusFacts) decided() uint64 {
	var n uint64
	for _, c := range f.Cycles {
		n += c.count()
	}
	return n
}

// all is the census of every decided number, whatever cycle it reaches:
// the tables added up, the first number of each delay the smallest, and
// the records over all numbers, which are records of their own cycles
// that exceed every smaller number's value. For a map with one cycle
// reached it is that cycle's census.
func (f censusFacts) all() censusCycle {
	if len(f.Cycles) == 1 {
		return f.Cycles[0]
	}
	counts := map[[2]uint64]uint64{}
	first := map[uint64]*big.Int{}
	var drecs []censusDelayRecord
	var precs []censusPathRecord
	for _, c := range f.Cycles {
		for _, e := range c.Table {
			counts[[2]uint64{e.Delay, e.Height}] += e.Count
		}
		for _, x := range c.First {
			n := decimal(x.N)
			if first[x.Delay] == nil || n.Cmp(first[x.Delay]) < 0 {
				first[x.Delay] = n
			}
		}
		drecs = append(drecs, c.DelayRecords...)
		precs = append(precs, c.PathRecords...)
	}
	var out censusCycle
	keys := make([][2]uint64, 0, len(counts))
	for k := range counts {
		keys = append(keys, k)
	}
	sort.Slice(keys, func(i, j int) bool {
		return keys[i][0] < keys[j][0] || keys[i][0] == keys[j][0] && keys[i][1] < keys[j][1]
	})
	for _, k := range keys {
		out.Table = append(out.Table, censusEntry{Delay: k[0], Height: k[1], Count: counts[k]})
	}
	for _, k := range keys {
		if n := len(out.First); n == 0 || out.First[n-1].Delay != k[0] {
			out.First = append(out.First, censusFirst{Delay: k[0], N: first[k[0]].String()})
		}
	}
	sort.SliceStable(drecs, func(i, j int) bool { return decimal(drecs[i].N).Cmp(decimal(drecs[j].N)) < 0 })
	for _, r := range drecs {
		if n := len(out.DelayRecords); n == 0 || r.Delay > out.DelayRecords[n-1].Delay {
			out.DelayRecords = append(out.DelayRecords, r)
		}
	}
	sort.SliceStable(precs, func(i, j int) bool { return decimal(precs[i].N).Cmp(decimal(precs[j].N)) < 0 })
	for _, r := range precs {
		if n := len(out.PathRecords); n == 0 || decimal(r.Peak).Cmp(decimal(out.PathRecords[n-1].Peak)) > 0 {
			out.PathRecords = append(out.PathRecords, r)
		}
	}
	return out
}

func decimal(s string) *big.Int {
	x, ok := new(big.Int).SetString(s, 10)
	if !ok {
		return new(big.Int)
	}
	return x
}

// marginals counts the numbers of each delay, of each number of steps of
// T, and of each height, each in increasing order of the value.
func (c censusCycle) marginals() (byDelay, bySteps, byHeight []censusCount) {
	d, s, h := map[uint64]uint64{}, map[uint64]uint64{}, map[uint64]uint64{}
	for _, e := range c.Table {
		d[e.Delay] += e.Count
		s[e.Delay-e.Height] += e.Count
		h[e.Height] += e.Count
	}
	return sortedCounts(d), sortedCounts(s), sortedCounts(h)
}

type censusCount struct{ Value, Count uint64 }

func sortedCounts(m map[uint64]uint64) []censusCount {
	out := make([]censusCount, 0, len(m))
	for v, n := range m {
		out = append(out, censusCount{v, n})
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Value < out[j].Value })
	return out
}

func (f censusFacts) mapText() string {
	return fmt.Sprintf("T(n) = n/2 for even n, (%s)/2 for odd n", f.Map)
}

func (f censusFacts) rangeText() string { return rangeText(f.Lo, f.Hi) }

// oddStep names the map's odd step in the standard map: "3n+1".
func (f censusFacts) oddStep() string { return f.Map }

// reachText says "reach 1" for the cycle through 1 of 3n+1, and names any
// other cycle by its smallest member.
func (f censusFacts) reachText(min string) string {
	if min == "1" && f.Map == "3n+1" {
		return "1"
	}
	return "the cycle whose smallest member is " + min
}

// undecidedDef says what undecided means for this certificate (SPEC.md,
// section 12, "Fates").
func (f censusFacts) undecidedDef() string {
	return fmt.Sprintf("its orbit reaches 2^%d, or it does not reach the smallest member of a cycle within %s of T, or only that of a cycle "+
		"of more than %s", f.Ceiling, count(f.Cap, "step", "steps"), count(f.Cap, "step", "steps"))
}

// outcome says how many numbers reach each cycle and how many are
// undecided: "31 reach 1 and 0 are undecided".
func (f censusFacts) outcome() string {
	var parts []string
	for _, c := range f.Cycles {
		n := c.count()
		parts = append(parts, fmt.Sprintf("%d %s %s", n, agree(n, "reaches", "reach"), f.reachText(c.Min)))
	}
	parts = append(parts, fmt.Sprintf("%d %s undecided", f.Undecided, agree(f.Undecided, "is", "are")))
	return list(parts, "and")
}

// summary is the claim in one line.
func (f censusFacts) summary() string {
	s := fmt.Sprintf("%s over %s: of the %s, %s", f.Map, f.rangeText(), count(f.numbers(), "number", "numbers"), f.outcome())
	all := f.all()
	if n := len(all.DelayRecords); n > 0 {
		r := all.DelayRecords[n-1]
		s += fmt.Sprintf("; the largest delay is %d, first at n = %s", r.Delay, r.N)
	}
	if n := len(all.PathRecords); n > 0 {
		r := all.PathRecords[n-1]
		s += fmt.Sprintf("; the largest peak is %s, first at n = %s", r.Peak, r.N)
	}
	return s
}

// sentence is the claim fit to quote.
func (f censusFacts) sentence() string {
	s := fmt.Sprintf("For %s, the certificate states for each n in %s either which cycle its orbit reaches, named by the cycle's "+
		"smallest member, with n's delay (the steps of the standard map, in which %s and n/2 count one step each, until n first "+
		"reaches that member), its height (the odd steps among them) and its peak (the largest value of its standard trajectory "+
		"on the way), or that n is undecided: %s.", f.mapText(), f.rangeText(), f.oddStep(), f.undecidedDef())
	s += fmt.Sprintf(" Of the %s, %s.", count(f.numbers(), "number", "numbers"), f.outcome())
	s += fmt.Sprintf(" For each block of 2^%d numbers and for the whole range, and for each cycle reached, it tabulates how many "+
		"numbers have each pair of delay and height, the first number with each delay, the delay records (each n whose delay is "+
		"larger than that of every smaller n of the block, or of the range, that reaches the same cycle) and the path records "+
		"(likewise for the peak).", f.E)
	return s
}

// caveat says what the claim does not prove.
func (f censusFacts) caveat() string {
	s := fmt.Sprintf("This is a table over %s only: it says nothing about any number at or above %s", f.rangeText(), numText(f.Hi))
	if f.Lo != "1" {
		s += fmt.Sprintf(" or below %s, and its records are records within the range: a number that sets one need not set one "+
			"among all positive integers, since the numbers below %s are not counted", f.Lo, f.Lo)
	}
	s += "."
	if f.Undecided > 0 {
		s += fmt.Sprintf(" An undecided number is not shown to grow without bound or to avoid a cycle: only that %s.", f.undecidedDef())
	}
	s += fmt.Sprintf(" It is not a proof of %s.", question(f.Map))
	return s
}

// rederived says what has re-derived the claim, for a claim read from the
// file as written.
func (f censusFacts) rederived(path string) string {
	if censusCheckable {
		return fmt.Sprintf("This is the claim as written in the file; show re-derives none of it, and 'descent check %s' re-derives it.", path)
	}
	return "This is the claim as written in the file; show re-derives none of it, and this version of descent cannot check census " +
		"certificates yet: nothing has re-derived these tables."
}

// censusNum is a non-negative integer that JSON carries as a number up to
// 2^53 and as a decimal string above, where JSON readers lose precision.
type censusNum string

func (n censusNum) MarshalJSON() ([]byte, error) {
	if v, err := strconv.ParseUint(string(n), 10, 64); err == nil && v <= 1<<53 {
		return []byte(string(n)), nil
	}
	return []byte(strconv.Quote(string(n))), nil
}

func numOf(x uint64) censusNum { return censusNum(strconv.FormatUint(x, 10)) }

// censusCounts is a JSON object from values (decimal keys) to counts, in
// increasing order of the value.
type censusCounts []censusCount

func (c censusCounts) MarshalJSON() ([]byte, error) {
	return objectJSON(len(c), func(i int) (uint64, censusNum) { return c[i].Value, numOf(c[i].Count) })
}

// censusFirsts is a JSON object from delays to the first number with each.
type censusFirsts []censusFirst

func (c censusFirsts) MarshalJSON() ([]byte, error) {
	return objectJSON(len(c), func(i int) (uint64, censusNum) { return c[i].Delay, censusNum(c[i].N) })
}

// objectJSON writes a JSON object of n entries with decimal keys, in the
// order given (encoding/json would sort the keys as strings: "10" < "2").
func objectJSON(n int, entry func(int) (uint64, censusNum)) ([]byte, error) {
	var b strings.Builder
	b.WriteString("{")
	for i := range n {
		if i > 0 {
			b.WriteString(",")
		}
		k, v := entry(i)
		val, _ := v.MarshalJSON()
		fmt.Fprintf(&b, "%q:%s", strconv.FormatUint(k, 10), val)
	}
	b.WriteString("}")
	return []byte(b.String()), nil
}

// censusTablesJSON is the JSON of a census over some numbers: the marginal
// tables, the joint table, the first numbers and the records.
type censusTablesJSON struct {
	Numbers        *censusNum     `json:"numbers,omitempty"` // in a cycle's tables
	DelayCounts    censusCounts   `json:"delay_counts"`
	StepsOfTCounts censusCounts   `json:"steps_of_t_counts"`
	HeightCounts   censusCounts   `json:"height_counts"`
	Table          []entryJSON    `json:"delay_height_counts"`
	FirstByDelay   censusFirsts   `json:"first_by_delay"`
	DelayRecords   []delayRecJSON `json:"delay_records"`
	PathRecords    []pathRecJSON  `json:"path_records"`
}

type entryJSON struct {
	Delay  uint64    `json:"delay"`
	Height uint64    `json:"height"`
	Count  censusNum `json:"count"`
}

type delayRecJSON struct {
	N     censusNum `json:"n"`
	Delay uint64    `json:"delay"`
}

type pathRecJSON struct {
	N    censusNum `json:"n"`
	Peak censusNum `json:"peak"`
}

type cycleJSON struct {
	Min censusNum `json:"min"`
	censusTablesJSON
}

// censusJSON is the report of a census certificate, one line of JSON.
type censusJSON struct {
	File     string    `json:"file"`
	Mode     string    `json:"mode"`
	Checked  string    `json:"checked"`
	Kind     string    `json:"kind"`
	Root     string    `json:"root"`
	Map      string    `json:"map"`
	From     censusNum `json:"from"`
	To       censusNum `json:"to"`
	BlockExp int       `json:"block_exponent"`
	Blocks   int       `json:"blocks"`
	Cap      uint32    `json:"cap"`
	Ceiling  int       `json:"ceiling"`
	Counts   struct {
		Numbers   censusNum `json:"numbers"`
		Decided   censusNum `json:"decided"`
		Undecided censusNum `json:"undecided"`
	} `json:"counts"`
	censusTablesJSON
	Cycles    []cycleJSON `json:"cycles"`
	Undecided []censusNum `json:"undecided"`
	Claim     string      `json:"claim"`
	NotProven string      `json:"not_proven"`
}

func (c censusCycle) tablesJSON() censusTablesJSON {
	d, s, h := c.marginals()
	n := numOf(c.count())
	t := censusTablesJSON{Numbers: &n, DelayCounts: d, StepsOfTCounts: s, HeightCounts: h, FirstByDelay: c.First,
		Table: []entryJSON{}, DelayRecords: []delayRecJSON{}, PathRecords: []pathRecJSON{}}
	for _, e := range c.Table {
		t.Table = append(t.Table, entryJSON{e.Delay, e.Height, numOf(e.Count)})
	}
	for _, r := range c.DelayRecords {
		t.DelayRecords = append(t.DelayRecords, delayRecJSON{censusNum(r.N), r.Delay})
	}
	for _, r := range c.PathRecords {
		t.PathRecords = append(t.PathRecords, pathRecJSON{censusNum(r.N), censusNum(r.Peak)})
	}
	return t
}

// json is the report; mode and checked say how far it was re-derived.
func (f censusFacts) json(file, root, mode, checked string) censusJSON {
	r := censusJSON{File: file, Mode: mode, Checked: checked, Kind: "census", Root: root, Map: f.Map, From: censusNum(f.Lo), To: censusNum(f.Hi),
		BlockExp: f.E, Blocks: f.Blocks, Cap: f.Cap, Ceiling: f.Ceiling, censusTablesJSON: f.all().tablesJSON(), Cycles: []cycleJSON{},
		Undecided: []censusNum{}, Claim: f.sentence(), NotProven: f.caveat()}
	r.Counts.Numbers, r.Counts.Decided, r.Counts.Undecided = censusNum(f.numbers()), numOf(f.decided()), numOf(f.Undecided)
	r.censusTablesJSON.Numbers = nil // counts.decided says it
	for _, c := range f.Cycles {
		r.Cycles = append(r.Cycles, cycleJSON{Min: censusNum(c.Min), censusTablesJSON: c.tablesJSON()})
	}
	for _, n := range f.UndecidedNs {
		r.Undecided = append(r.Undecided, censusNum(n))
	}
	return r
}
