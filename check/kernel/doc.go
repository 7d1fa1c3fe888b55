// Package kernel is descent's trusted checker: the code a reviewer reads,
// with cert/SPEC.md and nothing else, to believe a verdict. It re-derives
// every claim of a certificate in the plainest way, the trie one class at
// a time and a range one number at a time, with no goroutines, no memo
// and no tables of its own, and imports only the standard library and
// BLAKE2b. Package check plugs fast paths into it (Options.Fast); the
// kernel decides every verdict, and takes a fast path's table entry only
// after walking it itself. Wording beyond a failure's reason and place,
// the audit draw and the reading of -part are the caller's.
//
//	failure.go  the classes of failure and the reasons (SPEC.md, section 3)
//	file.go     the container at offsets within bounds, the Merkle tree
//	            and audit paths (sections 2, 3 steps 1-4, 7, 8)
//	header.go   the header bodies and block records with their value rules
//	            (sections 2, 6, 7)
//	sieve.go    a map's arithmetic; the trie walked class by class; stubs
//	            and counts by the map alone; memo entries verified; chunk
//	            records and joins (sections 1, 2, 3 step 7, 7, 8)
//	fate.go     fates, exceptions, bounds, work, predecessor rules
//	            (sections 1, 4, 6, 9)
//	range.go    a range's blocks derived number by number; totals (6)
//	jump.go     a range search's jump entries re-derived (section 1)
//	check.go    the order of a check, one path for whole, share, shard and
//	            part; the sieve of a range (sections 3, 7)
package kernel
