// Package cert owns the format of descent certificates, specified in
// SPEC.md beside it: the container (preamble, header, stored Merkle tree,
// offsets, records), the headers of sieves, ranges and shards, the chunks
// and their join sections, the range blocks, and the tree's hashes and
// audit paths, each with an encoder and a decoder that accept only the
// canonical bytes. It derives no claim: package emit computes what a
// certificate says and writes it through cert, and package check/kernel
// reads certificates with a decoder of its own, written from SPEC.md.
//
// An error about the bytes wraps ErrMalformed (ErrVersion for a file of
// another format version) and names the offset; a stored hash that does
// not match wraps ErrHashMismatch. No error carries a package prefix: the
// command puts its own context first (descent: show: FILE: offset 0: ...).
package cert
