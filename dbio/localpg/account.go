package localpg

import (
	"errors"
	"fmt"
	"os"
	"os/user"
	"path/filepath"
	"strconv"
	"syscall"
)

// serverAccount is the OS account that initdb and postgres run as when the
// caller is root. The zero value (nil pointer at use sites) means "the
// caller's own account".
type serverAccount struct {
	name     string
	uid, gid uint32
}

// serverAccountName is the OS account used when the caller is root. It is
// the account Debian's postgresql package creates (common practice).
const serverAccountName = "postgres"

// accountFor returns the account to run the server as for a caller whose
// effective user id is euid: nil for anyone but root, the "postgres"
// account for root.
func accountFor(euid int) (*serverAccount, error) {
	if euid != 0 {
		return nil, nil
	}
	u, err := user.Lookup(serverAccountName)
	if err != nil {
		var unknown user.UnknownUserError
		if errors.As(err, &unknown) {
			return nil, fmt.Errorf("running as root: initdb and postgres refuse to run as root, and there is no %q OS account to run them as; "+
				"create one (`useradd --system --home-dir /var/lib/postgresql postgres`) or install Debian's postgresql package, which does", serverAccountName)
		}
		return nil, fmt.Errorf("running as root: look up OS account %q: %w", serverAccountName, err)
	}
	uid, err := strconv.ParseUint(u.Uid, 10, 32)
	if err != nil {
		return nil, fmt.Errorf("running as root: OS account %q: uid %q: %w", serverAccountName, u.Uid, err)
	}
	gid, err := strconv.ParseUint(u.Gid, 10, 32)
	if err != nil {
		return nil, fmt.Errorf("running as root: OS account %q: gid %q: %w", serverAccountName, u.Gid, err)
	}
	return &serverAccount{name: u.Username, uid: uint32(uid), gid: uint32(gid)}, nil
}

// credential returns the process credential that makes a child run as a;
// nil when a is nil (run as the caller).
func (a *serverAccount) credential() *syscall.Credential {
	if a == nil {
		return nil
	}
	return &syscall.Credential{Uid: a.uid, Gid: a.gid}
}

// chown gives path to a; nothing to do when a is nil.
func (a *serverAccount) chown(path string) error {
	if a == nil {
		return nil
	}
	if err := os.Chown(path, int(a.uid), int(a.gid)); err != nil {
		return fmt.Errorf("give %s to OS account %q: %w", path, a.name, err)
	}
	return nil
}

// checkReachable returns an error naming the first parent of dir (dir
// excluded, since it is chowned to a) that a may not search, as then
// initdb and postgres cannot reach their files. Nothing to check when a is
// nil. Supplementary groups of a are not considered, so the check may be
// stricter than the kernel; directories made by Start under /tmp pass.
func (a *serverAccount) checkReachable(dir string) error {
	if a == nil {
		return nil
	}
	abs, err := filepath.Abs(dir)
	if err != nil {
		return fmt.Errorf("check directory %s: %w", dir, err)
	}
	for p := filepath.Dir(abs); ; p = filepath.Dir(p) {
		fi, err := os.Stat(p)
		if err != nil {
			return fmt.Errorf("check directory %s: %w", p, err)
		}
		if !searchable(fi, a.uid, a.gid) {
			return fmt.Errorf("directory %s is not searchable by OS account %q, which runs the server because the caller is root; "+
				"choose a directory under /tmp (Options.Dir, or TMPDIR)", p, a.name)
		}
		if p == filepath.Dir(p) {
			return nil
		}
	}
}

// searchable reports whether a process with user id uid and group id gid
// may search (traverse) the directory described by fi, by its mode bits.
func searchable(fi os.FileInfo, uid, gid uint32) bool {
	st, ok := fi.Sys().(*syscall.Stat_t)
	if !ok {
		// Unknown file system details: let initdb find out.
		return true
	}
	perm := fi.Mode().Perm()
	switch {
	case st.Uid == uid:
		return perm&0o100 != 0
	case st.Gid == gid:
		return perm&0o010 != 0
	default:
		return perm&0o001 != 0
	}
}
