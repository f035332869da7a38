package localpg

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func TestCheckReachable(t *testing.T) {
	// A directory under os.TempDir() rather than t.TempDir(), whose parents
	// are mode 0700 and so closed to anyone but the owner.
	base := tempName(t, "assort-pg-reach-")
	t.Cleanup(func() {
		if err := os.RemoveAll(base); err != nil {
			t.Error(err)
		}
	})
	closed := filepath.Join(base, "closed")
	open := filepath.Join(base, "open")
	for _, d := range []struct {
		path string
		mode os.FileMode
	}{{base, 0o711}, {closed, 0o700}, {open, 0o711}} {
		if err := os.Mkdir(d.path, d.mode); err != nil {
			t.Fatal(err)
		}
		// Chmod too, as Mkdir's mode is filtered by the umask.
		if err := os.Chmod(d.path, d.mode); err != nil {
			t.Fatal(err)
		}
	}
	owner := uint32(os.Geteuid())
	// An account that is neither the owner nor in the owning group of the
	// test's directories.
	stranger := &serverAccount{name: "stranger", uid: owner + 12345, gid: uint32(os.Getegid()) + 12345}
	tests := []struct {
		name    string
		acct    *serverAccount
		dir     string
		wantErr string // "" for success
	}{
		{"caller's own account", nil, filepath.Join(closed, "srv"), ""},
		{"owner", &serverAccount{name: "me", uid: owner, gid: uint32(os.Getegid())}, filepath.Join(closed, "srv"), ""},
		{"stranger, closed parent", stranger, filepath.Join(closed, "srv"), "directory " + closed + " is not searchable"},
		{"stranger, search-only parent", stranger, filepath.Join(open, "srv"), ""},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			err := tc.acct.checkReachable(tc.dir)
			switch {
			case tc.wantErr == "" && err != nil:
				t.Errorf("checkReachable(%s) = %v, want nil", tc.dir, err)
			case tc.wantErr != "" && (err == nil || !strings.Contains(err.Error(), tc.wantErr)):
				t.Errorf("checkReachable(%s) = %v, want an error containing %q", tc.dir, err, tc.wantErr)
			}
		})
	}
}
