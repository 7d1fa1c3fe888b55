package receipt

import (
	"go/parser"
	"go/token"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
)

// A receipt is text and a signature: its non-test files
// import no package of this module, so the checker and the command can
// change without it.
func TestReceiptImportsNoDescentPackage(t *testing.T) {
	files, err := filepath.Glob("*.go")
	require.NoError(t, err)
	for _, name := range files {
		if strings.HasSuffix(name, "_test.go") {
			continue
		}
		f, err := parser.ParseFile(token.NewFileSet(), name, nil, parser.ImportsOnly)
		require.NoError(t, err)
		for _, imp := range f.Imports {
			path := strings.Trim(imp.Path.Value, `"`)
			require.False(t, path == "descent" || strings.HasPrefix(path, "descent/"), "%s imports %s", name, path)
		}
	}
}
