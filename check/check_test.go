package check

import (
	"bytes"
	"go/build"
	"go/parser"
	"go/token"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"descent/check/kernel"
)

func vector(t testing.TB, name string) []byte {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "testdata", name))
	require.NoError(t, err)
	return b
}

// sieveOf gives a range check the committed sieve certificate name, checked
// by the kernel alone (reference) or with the fast paths.
func sieveOf(t testing.TB, name string, reference bool) func(kernel.Hash) (*kernel.Sieve, *kernel.Failure) {
	b := vector(t, name)
	return func(named kernel.Hash) (*kernel.Sieve, *kernel.Failure) {
		if reference {
			return kernel.RangeSieve(bytes.NewReader(b), int64(len(b)), name, named, kernel.Options{})
		}
		return RangeSieve(bytes.NewReader(b), int64(len(b)), name, named, Options{})
	}
}

// both checks b with the default checker and with the kernel alone, and
// requires the same verdict and reason.
func both(t testing.TB, b []byte, o Options, sieve string) *kernel.Result {
	t.Helper()
	ko := o.Options
	if sieve != "" {
		o.Sieve, ko.Sieve = sieveOf(t, sieve, false), sieveOf(t, sieve, true)
	}
	fast := Check(bytes.NewReader(b), int64(len(b)), o)
	ref := kernel.Check(bytes.NewReader(b), int64(len(b)), ko)
	require.Equal(t, reason(ref), reason(fast), "the kernel alone says %v; the default checker %v", ref.Err(), fast.Err())
	return fast
}

// reason is "valid" or the reason of the failure.
func reason(r *kernel.Result) string {
	if r.Failure == nil {
		return "valid"
	}
	return r.Failure.Reason
}

func TestImportsOnlyStdlibAndBlake2b(t *testing.T) {
	// The checker must stay independent of the code that writes
	// certificates: the non-test files of check and check/kernel import the
	// standard library and golang.org/x/crypto/blake2b, and check also the
	// kernel, nothing else, directly or through another package.
	std := func(path string) bool {
		if path == "descent" || strings.HasPrefix(path, "descent/") {
			return false // the module's own packages have no dot either
		}
		pkg, err := build.Import(path, "", build.FindOnly)
		return err == nil && pkg.Goroot
	}
	for dir, allowed := range map[string][]string{".": {"golang.org/x/crypto/blake2b", "descent/check/kernel"}, "kernel": {"golang.org/x/crypto/blake2b"}} {
		ok := func(path string) bool { return std(path) || strings.Contains(strings.Join(allowed, " "), path) }
		files, err := filepath.Glob(filepath.Join(dir, "*.go"))
		require.NoError(t, err)
		fset := token.NewFileSet()
		for _, name := range files {
			if strings.HasSuffix(name, "_test.go") {
				continue
			}
			f, err := parser.ParseFile(fset, name, nil, parser.ImportsOnly)
			require.NoError(t, err)
			for _, imp := range f.Imports {
				path := strings.Trim(imp.Path.Value, `"`)
				require.True(t, ok(path), "%s imports %s", name, path)
			}
		}
		// Indirectly: every dependency is standard, allowed, or one of
		// blake2b's own (golang.org/x/sys/cpu, x/crypto/internal).
		out, err := exec.Command("go", "list", "-deps", "./"+dir).Output()
		require.NoError(t, err)
		for _, dep := range strings.Fields(string(out)) {
			if dep == "descent/check" || dep == "descent/check/kernel" || ok(dep) || strings.HasPrefix(dep, "golang.org/x/crypto/") || strings.HasPrefix(dep, "golang.org/x/sys/") ||
				strings.HasPrefix(dep, "internal/") || strings.HasPrefix(dep, "vendor/") {
				continue
			}
			t.Fatalf("%s depends on %s", dir, dep)
		}
	}
	// And the rule itself: the emitter is not allowed.
	require.False(t, std("descent/emit"))
	require.False(t, std("descent/cert"))
	require.True(t, std("math/big"))
}

var valid = []string{"sieve-3n+1-k4.dcert", "sieve-3n+1-k10.dcert", "sieve-5n+1-k16.dcert", "sieve-3n-1-k12.dcert", "sieve-3n+1-k8-joins.dcert"}

func TestValidVectorsAgreeWithTheKernel(t *testing.T) {
	for _, name := range valid {
		for _, w := range []int{1, 3} {
			require.Equal(t, "valid", reason(both(t, vector(t, name), Options{Workers: w}, "")), name)
		}
	}
	for r, s := range map[string]string{"range-3n-1-k12-to-10^5.dcert": "sieve-3n-1-k12.dcert", "range-3n+1-k8-joins-to-2^16.dcert": "sieve-3n+1-k8-joins.dcert"} {
		require.Equal(t, "valid", reason(both(t, vector(t, r), Options{}, s)), r)
	}
	shard := vector(t, "shard-1of2-3n+1-k8.dcert")
	require.Equal(t, "valid", reason(both(t, shard, Options{}, "")))
	for _, span := range []kernel.Span{{I: 0, N: 2}, {I: 1, N: 2}} {
		o := Options{}
		o.Span = &span
		require.Equal(t, "valid", reason(both(t, vector(t, "sieve-3n+1-k10.dcert"), o, "")))
	}
}

func TestEveryBitFlipAgreesWithTheKernel(t *testing.T) {
	// Every flip of a sieve with joins and of a range on it: the default
	// checker and the kernel alone reject each for the same reason.
	for _, c := range []struct{ file, sieve string }{{"sieve-3n+1-k8-joins.dcert", ""}, {"range-3n-1-k12-to-10^5.dcert", "sieve-3n-1-k12.dcert"}} {
		good := vector(t, c.file)
		for i := range len(good) * 8 {
			if testing.Short() && i%8 != 0 {
				continue
			}
			bad := bytes.Clone(good)
			bad[i/8] ^= 0x80 >> (i % 8)
			require.NotEqual(t, "valid", reason(both(t, bad, Options{Workers: 2}, c.sieve)), "%s: bit %d flipped", c.file, i)
		}
	}
}

func TestMemoEntriesAreAllKept(t *testing.T) {
	// The memo's entries, written here, are the true codes: the kernel
	// keeps every one it is given, so no speed is lost to a wrong entry.
	for _, c := range []struct {
		m kernel.Map
		j int
	}{{kernel.Map{A: 3, B: 1}, 24}, {kernel.Map{A: 3, B: -1}, 20}, {kernel.Map{A: 5, B: 1}, 16}, {kernel.Map{A: 3, B: 1}, 9}} {
		p := kernel.NewParams(c.m, c.j)
		m := newMemo(p).(*memo)
		rows := 0
		for s, row := range m.codes {
			for u, e := range row {
				require.NotNil(t, e, "%v j = %d: the entry for s = %d, u = %d was not kept", c.m, c.j, s, u)
			}
			if row != nil {
				rows++
			}
		}
		require.Positive(t, rows)
	}
}

func TestAuditDrawDependsOnRootAndSeed(t *testing.T) {
	// The blocks chosen depend on the root and the seed, and nothing else.
	root := kernel.Hash{1, 2, 3}
	require.Equal(t, AuditDraw(root, "a", 64, 5), AuditDraw(root, "a", 64, 5))
	require.NotEqual(t, AuditDraw(root, "a", 64, 5), AuditDraw(root, "b", 64, 5))
	require.Len(t, AuditDraw(root, "a", 64, 5), 5)
	a, err := Sample(5, "reviewer")(root, 64)
	require.NoError(t, err)
	require.Equal(t, &kernel.Audit{Blocks: 64, Drawn: AuditDraw(root, "reviewer", 64, 5), Seed: "reviewer", SeedFrom: "reader"}, a)
	a, err = Sample(64, "")(root, 64)
	require.NoError(t, err)
	require.Nil(t, a, "a sample of every block is a full check")
}

func TestPartThatNamesNothingIsTheReadersMistake(t *testing.T) {
	b := vector(t, "sieve-3n+1-k4.dcert")
	rep := Check(bytes.NewReader(b), int64(len(b)), Options{})
	require.NoError(t, rep.Err())
	for _, part := range []string{"2", "-1", "x", "0/0", "2/2", "1/3", "1/x", ""} {
		res := Part(bytes.NewReader(b), int64(len(b)), part, *rep.Root, Options{})
		require.ErrorIs(t, res.Err(), kernel.ErrUsage, part)
		require.Equal(t, kernel.ReasonPart, res.Failure.Reason, part)
		require.NotEmpty(t, res.Failure.Hint, part)
	}
	require.NoError(t, Part(bytes.NewReader(b), int64(len(b)), "1", *rep.Root, Options{}).Err())
	require.NoError(t, Part(bytes.NewReader(b), int64(len(b)), "1/2", *rep.Root, Options{}).Err())
}
