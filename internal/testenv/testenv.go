// Package testenv lets tests that need real outside parts (Debian's
// indi-bin, postgresql, chromium) find them, skip with a message naming the
// package when they are missing on a developer's machine, and fail instead
// under CI (CI=true), so that a green CI run proves the test ran.
package testenv

import (
	"os"
	"os/exec"
	"testing"
)

// InCI reports whether the tests run under CI (the environment variable CI
// is "true" or "1").
func InCI() bool {
	v := os.Getenv("CI")
	return v == "true" || v == "1"
}

// Missing skips the test (locally) or fails it (under CI) because the named
// Debian package is not installed; why says what was looked for.
func Missing(t testing.TB, debianPackage, why string) {
	t.Helper()
	if InCI() {
		t.Fatalf("%s: needs Debian package %s (apt-get install %s); CI must install it", why, debianPackage, debianPackage)
	}
	t.Skipf("%s: skipped, needs Debian package %s (apt-get install %s)", why, debianPackage, debianPackage)
}

// LookPath returns the path of the program name, or skips/fails the test
// through Missing naming debianPackage when it is not on PATH (or in the
// extra directories given, searched first).
func LookPath(t testing.TB, name, debianPackage string, extraDirs ...string) string {
	t.Helper()
	for _, d := range extraDirs {
		p := d + "/" + name
		if fi, err := os.Stat(p); err == nil && !fi.IsDir() && fi.Mode()&0o111 != 0 {
			return p
		}
	}
	p, err := exec.LookPath(name)
	if err != nil {
		Missing(t, debianPackage, name+" not found")
	}
	return p
}
