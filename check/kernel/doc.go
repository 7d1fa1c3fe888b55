// Package kernel is descent's trusted checker: the code a reviewer reads,
// with cert/SPEC.md and nothing else, to believe a verdict. It re-derives
// every claim of a certificate in the plainest way, the trie one class at
// a time and a range one number at a time, with no goroutines, no memo
// and no tables of its own, and imports only the standard library and
// BLAKE2b. Package check plugs fast paths into it (Options.Fast); the
// kernel decides every verdict, and takes a fast path's table entry only
// after walking it itself.
//
//	failure.go  the classes of failure and the reasons (SPEC.md, section 3)
//	file.go     the container read at offsets within bounds; the Merkle tree,
//	            audit paths and the audit draw (sections 2, 3 steps 1-4, 6, 7)
//	header.go   the header bodies and block records, with their value rules
//	            (sections 2, 6, 7)
//	sieve.go    a map's arithmetic; the walk of the trie class by class; the
//	            stubs and counts by the map alone; memo entries verified
//	            (sections 1, 2, 3 step 7, 7)
//	chunk.go    the chunk records: framing, decoding and judging, joins (2, 8)
//	fate.go     the exception and small bounds, exceptions, fates, the work
//	            bound, predecessor rules (sections 1, 4, 6, 9)
//	range.go    the sieve a range rests on, its blocks derived number by
//	            number, their totals and comparison (section 6)
//	jump.go     entries of a range search's table of several steps at
//	            once, re-derived step by step (section 1)
//	check.go    the order of a check: whole, share, shard, part; the sieve
//	            of a range (sections 3, 7)
package kernel
