package localpg

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
)

// ErrNotInstalled is returned (wrapped) by FindBinDir and Start when no
// PostgreSQL server binaries are found.
var ErrNotInstalled = errors.New("postgresql server binaries (initdb, postgres) not found on PATH or in /usr/lib/postgresql/*/bin; " +
	"install them with `apt-get install -y postgresql` as root, or `sudo apt-get install -y postgresql`")

// debianRoot is where Debian and Ubuntu install one directory per major
// version of the server.
const debianRoot = "/usr/lib/postgresql"

// serverBinaries are the programs Start runs; they must sit in one
// directory so that they come from the same version.
var serverBinaries = []string{"initdb", "postgres"}

// FindBinDir returns the directory holding PostgreSQL's initdb and postgres
// programs: the first directory on PATH that holds both, else the newest
// major version under /usr/lib/postgresql/<major>/bin that holds both.
// The error wraps ErrNotInstalled when none does.
func FindBinDir() (string, error) {
	for _, dir := range binDirCandidates(os.Getenv("PATH"), debianRoot) {
		if hasServerBinaries(dir) {
			return dir, nil
		}
	}
	return "", fmt.Errorf("find postgresql: %w", ErrNotInstalled)
}

// binDirCandidates lists the directories to search, in order: those on the
// PATH list path, then root/<version>/bin by descending version.
func binDirCandidates(path, root string) []string {
	var dirs []string
	for _, d := range filepath.SplitList(path) {
		if d == "" {
			d = "."
		}
		dirs = append(dirs, d)
	}
	entries, err := os.ReadDir(root)
	if err != nil {
		// No Debian layout here; PATH was the only place to look.
		return dirs
	}
	var versions []string
	for _, e := range entries {
		if _, ok := parseVersion(e.Name()); ok {
			versions = append(versions, e.Name())
		}
	}
	sort.Slice(versions, func(i, j int) bool {
		return versionLess(versions[j], versions[i])
	})
	for _, v := range versions {
		dirs = append(dirs, filepath.Join(root, v, "bin"))
	}
	return dirs
}

// parseVersion splits a directory name such as "15" or "9.6" into its
// numeric parts; ok is false for any other name.
func parseVersion(name string) (parts []int, ok bool) {
	for _, f := range strings.Split(name, ".") {
		n, err := strconv.Atoi(f)
		if err != nil || n < 0 {
			return nil, false
		}
		parts = append(parts, n)
	}
	return parts, true
}

// versionLess reports whether version a sorts before version b, comparing
// numeric parts in order ("9.6" < "10" < "15").
func versionLess(a, b string) bool {
	pa, _ := parseVersion(a)
	pb, _ := parseVersion(b)
	for i := 0; i < len(pa) && i < len(pb); i++ {
		if pa[i] != pb[i] {
			return pa[i] < pb[i]
		}
	}
	return len(pa) < len(pb)
}

// hasServerBinaries reports whether dir holds every program of
// serverBinaries as an executable regular file.
func hasServerBinaries(dir string) bool {
	for _, name := range serverBinaries {
		fi, err := os.Stat(filepath.Join(dir, name))
		if err != nil || !fi.Mode().IsRegular() || fi.Mode().Perm()&0o111 == 0 {
			return false
		}
	}
	return true
}
