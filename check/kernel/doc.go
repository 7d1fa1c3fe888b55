// Package kernel is descent's trusted checker: the code a reviewer reads,
// with cert/SPEC.md, to believe a verdict. It re-derives every claim of a
// certificate in the plainest way, one class and one number at a time,
// with no goroutines, no memo and no tables of its own, and imports only
// the standard library and BLAKE2b. Package check plugs fast paths into it
// (Options.Fast) and never decides a verdict without it.
//
//	failure.go  the classes of failure and the reasons (SPEC.md, section 3)
//	file.go     the container read at offsets within bounds, the Merkle tree,
//	            audit paths and the audit draw (sections 2, 3 steps 1-4, 6, 7)
//	header.go   the header bodies and block records, with their value rules
//	sieve.go    a map's arithmetic, the walk of the trie class by class,
//	            the stubs and the counts by the map alone (sections 1, 3, 7)
//	chunk.go    the chunk records: framing, grammar, claims, joins (2, 3, 8)
//	fate.go     exceptions, fates, work bounds, the small bound, rules (1, 4, 6, 9)
//	range.go    a range's blocks derived number by number, totals (6)
//	check.go    the order of a check: whole, share, shard, part (3, 7)
package kernel
