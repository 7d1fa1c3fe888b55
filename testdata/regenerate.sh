#!/bin/sh
# Regenerates the certificates in this directory with the current
# descent, after a change of the format: run from the repository root.
set -e
d=$(mktemp -d)
go build -o "$d/descent" ./cmd/descent
e() { "$d/descent" "$@" >/dev/null; }
t=testdata
rm -f $t/*.dcert
e emit sieve -k 4 -o $t/sieve-3n+1-k4.dcert
e emit sieve -k 10 -o $t/sieve-3n+1-k10.dcert
e emit sieve -k 12 -o $t/sieve-3n+1-k12.dcert
e emit sieve -k 8 -join -o $t/sieve-3n+1-k8-joins.dcert
e emit sieve -k 12 -map 3n-1 -o $t/sieve-3n-1-k12.dcert
e emit sieve -k 16 -map 5n+1 -o $t/sieve-5n+1-k16.dcert
e emit sieve -k 8 -shard 1/2 -o $t/shard-1of2-3n+1-k8.dcert
e emit range -sieve $t/sieve-3n+1-k12.dcert -from 1 -to 2^20 -block 14 -o $t/range-3n+1-k12-to-2^20.dcert
e emit range -sieve $t/sieve-3n+1-k12.dcert -from 1 -to 2^20 -block 14 -rules auto -o $t/range-3n+1-k12-to-2^20-rules.dcert
e emit range -sieve $t/sieve-3n-1-k12.dcert -from 1 -to 100000 -block 14 -o $t/range-3n-1-k12-to-10^5.dcert
e emit census -from 1 -to 32 -block 4 -o $t/census-3n+1-to-32.dcert
e emit range -sieve $t/sieve-3n+1-k8-joins.dcert -from 1 -to 2^16 -block 12 -rules auto -o $t/range-3n+1-k8-joins-to-2^16.dcert
rm -rf "$d"
