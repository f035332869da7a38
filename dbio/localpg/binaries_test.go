package localpg

import (
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
)

func TestBinDirCandidates(t *testing.T) {
	root := t.TempDir()
	for _, d := range []string{"9.6", "15", "10", "16", "common", "15.2"} {
		if err := os.MkdirAll(filepath.Join(root, d, "bin"), 0o755); err != nil {
			t.Fatal(err)
		}
	}
	bin := func(v string) string { return filepath.Join(root, v, "bin") }
	tests := []struct {
		name, path string
		want       []string
	}{
		{
			name: "path first, then newest version",
			path: "/opt/a" + string(os.PathListSeparator) + "/opt/b",
			want: []string{"/opt/a", "/opt/b", bin("16"), bin("15.2"), bin("15"), bin("10"), bin("9.6")},
		},
		{
			name: "empty path",
			path: "",
			want: []string{bin("16"), bin("15.2"), bin("15"), bin("10"), bin("9.6")},
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got := binDirCandidates(tc.path, root)
			if !slices.Equal(got, tc.want) {
				t.Errorf("binDirCandidates(%q) =\n%s\nwant\n%s", tc.path, strings.Join(got, "\n"), strings.Join(tc.want, "\n"))
			}
		})
	}
	if got := binDirCandidates("/opt/a", filepath.Join(root, "missing")); !slices.Equal(got, []string{"/opt/a"}) {
		t.Errorf("without a version root: %v, want [/opt/a]", got)
	}
}

func TestHasServerBinaries(t *testing.T) {
	tests := []struct {
		name  string
		files map[string]os.FileMode
		want  bool
	}{
		{"both executable", map[string]os.FileMode{"initdb": 0o755, "postgres": 0o755}, true},
		{"postgres missing", map[string]os.FileMode{"initdb": 0o755, "pg_ctl": 0o755}, false},
		{"not executable", map[string]os.FileMode{"initdb": 0o755, "postgres": 0o644}, false},
		{"empty", nil, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			for name, mode := range tc.files {
				p := filepath.Join(dir, name)
				if err := os.WriteFile(p, []byte("#!/bin/sh\n"), mode); err != nil {
					t.Fatal(err)
				}
				if err := os.Chmod(p, mode); err != nil {
					t.Fatal(err)
				}
			}
			if got := hasServerBinaries(dir); got != tc.want {
				t.Errorf("hasServerBinaries = %v, want %v", got, tc.want)
			}
		})
	}
}

func TestVersionLess(t *testing.T) {
	tests := []struct {
		a, b string
		want bool
	}{
		{"9.6", "10", true},
		{"10", "9.6", false},
		{"15", "15.2", true},
		{"15", "15", false},
		{"16", "15", false},
	}
	for _, tc := range tests {
		t.Run(tc.a+"<"+tc.b, func(t *testing.T) {
			if got := versionLess(tc.a, tc.b); got != tc.want {
				t.Errorf("versionLess(%q, %q) = %v, want %v", tc.a, tc.b, got, tc.want)
			}
		})
	}
}
