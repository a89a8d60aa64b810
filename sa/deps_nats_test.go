package sa_test

import (
	"os/exec"
	"strings"
	"testing"
)

// TestNATSNotImported: the core packages must not pull the NATS client or
// server (or the oracle/remote package that uses them) into a build; only
// a program that imports oracle/remote pays for them.
func TestNATSNotImported(t *testing.T) {
	gobin, err := exec.LookPath("go")
	if err != nil {
		t.Skip("go command not found; cannot list dependencies")
	}
	const mod = "github.com/stochroot/stochroot/"
	for _, pkg := range []string{"sa", "oracle", "schedule", "sampling"} {
		out, err := exec.Command(gobin, "list", "-deps", mod+pkg).CombinedOutput()
		if err != nil {
			t.Fatalf("go list -deps %s: %v\n%s", pkg, err, out)
		}
		deps := strings.Fields(string(out))
		for _, dep := range deps {
			if strings.HasPrefix(dep, "github.com/nats-io/") || strings.HasSuffix(dep, "/oracle/remote") {
				t.Errorf("%s depends on %s", pkg, dep)
			}
		}
		if len(deps) == 0 || deps[len(deps)-1] != mod+pkg {
			t.Errorf("go list -deps %s output does not look right:\n%s", pkg, out)
		}
	}
}
