package main

import (
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"go.yaml.in/yaml/v3"
)

// The CI gate of the README, as a workflow file. The README shows the
// fixture itself, and this test runs the commands it reads from the
// fixture, so the two cannot drift apart.
const gateFixture = "../../testdata/ci/descent-gate.yml"

type workflow struct {
	Jobs map[string]struct {
		Env   map[string]string `yaml:"env"`
		Steps []struct {
			Name string            `yaml:"name"`
			Uses string            `yaml:"uses"`
			With map[string]string `yaml:"with"`
			Run  string            `yaml:"run"`
		} `yaml:"steps"`
	} `yaml:"jobs"`
}

func TestGateWorkflowIsInTheREADME(t *testing.T) {
	fixture, err := os.ReadFile(gateFixture)
	require.NoError(t, err)
	readme, err := os.ReadFile("../../README.md")
	require.NoError(t, err)
	indented := regexp.MustCompile(`(?m)^(.)`).ReplaceAllString(string(fixture), "    $1")
	require.True(t, strings.Contains(string(readme), indented), "the README shows %s verbatim, indented by four spaces", gateFixture)
}

// TestGateRecipe runs the workflow's job the way a runner would, on this
// machine: the repository's checkout is a scratch directory holding the
// certificates the job names (copied from testdata), descent's checkout
// is this source tree instead of the network, Go is the Go running this
// test, and each run step goes to bash -e as on the runner. The job must
// pass with the pinned root and fail with another root, with a damaged
// certificate and without the sieve.
func TestGateRecipe(t *testing.T) {
	if testing.Short() {
		t.Skip("builds descent from a copy of the source tree")
	}
	b, err := os.ReadFile(gateFixture)
	require.NoError(t, err)
	var wf workflow
	require.NoError(t, yaml.Unmarshal(b, &wf))
	require.Len(t, wf.Jobs, 1)
	job := wf.Jobs["check"]
	for _, k := range []string{"CERT", "SIEVE", "ROOT"} {
		require.NotEmpty(t, job.Env[k], "the job sets %s", k)
	}
	tree, err := filepath.Abs("../..")
	require.NoError(t, err)
	gobin := t.TempDir()

	// run runs the job in a fresh workspace; damage, if set, changes it
	// first. It returns the exit status of the first step that fails.
	run := func(env map[string]string, damage func(ws string)) (int, string) {
		ws := t.TempDir()
		for _, k := range []string{"CERT", "SIEVE"} {
			data, err := os.ReadFile(filepath.Join(tree, "testdata", filepath.Base(job.Env[k])))
			require.NoError(t, err, "the job's %s is a certificate of testdata", k)
			p := filepath.Join(ws, job.Env[k])
			require.NoError(t, os.MkdirAll(filepath.Dir(p), 0o755))
			require.NoError(t, os.WriteFile(p, data, 0o644))
		}
		if damage != nil {
			damage(ws)
		}
		vars := os.Environ()
		for k, v := range env {
			vars = append(vars, k+"="+v)
		}
		// go install writes to GOBIN, which is on the PATH, as setup-go
		// arranges for GOPATH/bin on a runner.
		vars = append(vars, "GOBIN="+gobin, "PATH="+gobin+string(os.PathListSeparator)+os.Getenv("PATH"))
		for _, step := range job.Steps {
			switch {
			case step.Uses == "actions/checkout@v4" && step.With["repository"] == "":
				// the workspace is the repository's checkout
			case step.Uses == "actions/checkout@v4" && step.With["repository"] == "${{ env.DESCENT_REPO }}":
				require.NoError(t, os.Symlink(tree, filepath.Join(ws, step.With["path"])))
			case step.Uses == "actions/setup-go@v5":
				// the go command running this test
			case step.Run != "":
				cmd := exec.Command("bash", "-e", "-c", step.Run)
				cmd.Dir, cmd.Env = ws, vars
				out, err := cmd.CombinedOutput()
				var exit *exec.ExitError
				if errors.As(err, &exit) {
					return exit.ExitCode(), string(out)
				}
				require.NoError(t, err)
			default:
				t.Fatalf("a step this test does not know how to run: %+v", step)
			}
		}
		return 0, ""
	}

	code, out := run(job.Env, nil)
	require.Zero(t, code, "the job passes with the pinned root:\n%s", out)

	other := map[string]string{}
	for k, v := range job.Env {
		other[k] = v
	}
	other["ROOT"] = strings.Repeat("0", 64)
	code, out = run(other, nil)
	require.Equal(t, exitInvalid, code, out)
	require.Contains(t, out, "INVALID (root)")

	code, out = run(job.Env, func(ws string) {
		p := filepath.Join(ws, job.Env["CERT"])
		b, err := os.ReadFile(p)
		require.NoError(t, err)
		b[len(b)-2] ^= 0x40 // inside the last block's record
		require.NoError(t, os.WriteFile(p, b, 0o644))
	})
	require.Equal(t, exitInvalid, code, "a damaged certificate fails the job:\n%s", out)

	code, out = run(job.Env, func(ws string) { require.NoError(t, os.Remove(filepath.Join(ws, job.Env["SIEVE"]))) })
	require.NotZero(t, code, "a missing sieve fails the job:\n%s", out)
}
