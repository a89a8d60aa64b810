package sa_test

import (
	"os/exec"
	"strings"
	"testing"
)

// TestPlotNotImported: a service that imports sa must not pull the plotting
// library (or the saplot package) into its build.
func TestPlotNotImported(t *testing.T) {
	gobin, err := exec.LookPath("go")
	if err != nil {
		t.Skip("go command not found; cannot list dependencies")
	}
	out, err := exec.Command(gobin, "list", "-deps", ".").CombinedOutput()
	if err != nil {
		t.Fatalf("go list -deps: %v\n%s", err, out)
	}
	for _, dep := range strings.Fields(string(out)) {
		if strings.HasPrefix(dep, "gonum.org/v1/plot") || strings.HasSuffix(dep, "/saplot") {
			t.Errorf("sa depends on %s", dep)
		}
	}
	if !strings.Contains(string(out), "gonum.org/v1/gonum/stat/distuv") {
		t.Errorf("go list -deps output does not look right:\n%s", out)
	}
}
