package server

import (
	"fmt"
	"os"
	"runtime"
)

// KeyFileWarning returns a warning when a private key file can be read or
// written by users other than its owner (any of the mode bits 0o077), or ""
// when it cannot or the platform has no such bits. OpenSSH refuses keys in
// that state; we warn, since the daemon may run from files a deployment
// tool laid out.
func KeyFileWarning(path string) string {
	if runtime.GOOS == "windows" || path == "" {
		return ""
	}
	fi, err := os.Stat(path)
	if err != nil {
		return ""
	}
	if m := fi.Mode().Perm(); m&0o077 != 0 {
		return fmt.Sprintf("private key file %s has mode %04o: others can read it; chmod 600 it", path, m)
	}
	return ""
}
