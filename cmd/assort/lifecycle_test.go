package main

import (
	"strings"
	"testing"
)

// TestPublishPruneDrop walks a model through the lifecycle: an unpublished
// fit leaves the view alone, publish moves it (also back to an older
// version), prune never touches the published version, drop refuses the
// published one.
func TestPublishPruneDrop(t *testing.T) {
	w := newWorkspace(t)
	w.blobs(t, "pts", []int{30, 20, 10}, 3)
	q := "SELECT id, x, y FROM " + w.table("pts")
	fitN := func(where string, extra ...string) {
		args := append([]string{"fit", "life", "--query", q + where, "--key", "id", "--k", "3"}, extra...)
		mustAssort(t, w.args(args...)...)
	}
	viewRows := func() int {
		var n int
		w.scalar(t, "SELECT count(*) FROM "+w.table("life"), &n)
		return n
	}
	fitN("")                                // v1: 60 rows, published
	fitN(" WHERE id <= 50", "--no-publish") // v2: 50 rows, ready only
	if n := viewRows(); n != 60 {
		t.Fatalf("after --no-publish the view shows %d rows, want v1's 60", n)
	}
	mustAssort(t, w.args("publish", "life@2")...)
	if n := viewRows(); n != 50 {
		t.Fatalf("after publish life@2 the view shows %d rows, want 50", n)
	}
	mustAssort(t, w.args("publish", "life@1")...) // rollback
	if n := viewRows(); n != 60 {
		t.Fatalf("after publishing life@1 again the view shows %d rows, want 60", n)
	}
	var who string
	w.scalar(t, "SELECT string_agg(version::text || '/' || (published_by = current_user)::text, ',' ORDER BY published_at) FROM "+w.table("publications"), &who)
	if who != "1/true,2/true,1/true" {
		t.Fatalf("publication history %q", who)
	}
	// The publication in force is the newest by sequence, not by clock: a
	// server clock stepped back a day must not bring life@2 back (the
	// refusal to drop life@1 below checks that life@1 is still published).
	w.exec(t, "UPDATE "+w.table("publications")+" SET published_at = published_at - interval '1 day' WHERE seq = (SELECT max(seq) FROM "+w.table("publications")+")")
	fitN(" WHERE id <= 40", "--no-publish") // v3
	fitN(" WHERE id <= 30", "--no-publish") // v4

	// keep 1: v4 stays as newest, v1 stays as published, v2 and v3 go.
	mustAssort(t, w.args("prune", "life", "--keep", "1")...)
	var statuses string
	w.scalar(t, "SELECT string_agg(version || ':' || status, ',' ORDER BY version) FROM "+w.table("models"), &statuses)
	if statuses != "1:ready,2:pruned,3:pruned,4:ready" {
		t.Fatalf("after prune: %s", statuses)
	}
	var tables string
	w.scalar(t, `SELECT string_agg(relname, ',' ORDER BY relname) FROM pg_class WHERE relnamespace = $1::regnamespace AND relname LIKE 'life_v%' AND relkind = 'r'`, &tables, w.schema)
	if tables != "life_v1,life_v4" {
		t.Fatalf("result tables after prune: %s", tables)
	}
	// The scoring functions went with their tables, and the stable
	// forwarder answers for the published version (v1).
	var funcs string
	w.scalar(t, `SELECT string_agg(proname, ',' ORDER BY proname) FROM pg_proc WHERE pronamespace = $1::regnamespace AND proname LIKE 'life%'`, &funcs, w.schema)
	if funcs != "life_cluster,life_v1_cluster,life_v4_cluster" {
		t.Fatalf("scoring functions after prune: %s", funcs)
	}
	var disagree int
	w.scalar(t, "SELECT count(*) FROM "+w.table("pts")+" p JOIN "+w.table("life")+" r USING (id) WHERE "+w.table("life_cluster")+"(p.x, p.y) <> r.cluster", &disagree)
	if disagree != 0 {
		t.Fatalf("%d rows where the stable scoring function disagrees with the published results", disagree)
	}

	bad := []struct {
		args []string
		code int
		msg  string
	}{
		{[]string{"prune", "life", "--keep", "0"}, exitUsage, "--keep must be at least 1"},
		{[]string{"publish", "life@2"}, exitFailure, "the version is pruned"},
		{[]string{"publish", "life@9"}, exitFailure, "life@9"},
		{[]string{"publish", "life"}, exitUsage, "needs a version"},
		{[]string{"drop", "life@1"}, exitFailure, "published version"},
		{[]string{"show", "life@3"}, exitOK, "life@3 (pruned)"},
	}
	for _, b := range bad {
		code, out, stderr := assort(t, w.args(b.args...)...)
		if code != b.code || !strings.Contains(stderr+out, b.msg) {
			t.Errorf("assort %v: exit %d, want %d with %q; output:\n%s%s", b.args, code, b.code, b.msg, out, stderr)
		}
	}
	// Dropping the newest version retires its number: the next fit is
	// life@5, never a second life@4.
	mustAssort(t, w.args("drop", "life@4")...)
	fitN(" WHERE id <= 20", "--no-publish")
	var versions string
	w.scalar(t, "SELECT string_agg(version::text, ',' ORDER BY version) FROM "+w.table("models"), &versions)
	if versions != "1,2,3,5" {
		t.Fatalf("versions after dropping life@4 and fitting again: %s, want 1,2,3,5", versions)
	}
	mustAssort(t, w.args("drop", "life")...)
	var left int
	w.scalar(t, "SELECT (SELECT count(*) FROM "+w.table("models")+") + (SELECT count(*) FROM "+w.table("retired_versions")+")", &left)
	if left != 0 {
		t.Fatalf("%d registry rows left after dropping the model", left)
	}
	// A model of the same name made afresh starts again at 1.
	fitN("")
	w.scalar(t, "SELECT string_agg(version::text, ',') FROM "+w.table("models"), &versions)
	if versions != "1" {
		t.Fatalf("versions of a new model of a dropped name: %s, want 1", versions)
	}
	mustAssort(t, w.args("drop", "life")...)
	w.scalar(t, `SELECT coalesce(string_agg(relname, ','), '') FROM pg_class WHERE relnamespace = $1::regnamespace AND relname LIKE 'life%'`, &tables, w.schema)
	if tables != "" {
		t.Fatalf("relations left after dropping the model: %s", tables)
	}
	w.scalar(t, `SELECT coalesce(string_agg(proname, ','), '') FROM pg_proc WHERE pronamespace = $1::regnamespace AND proname LIKE 'life%'`, &funcs, w.schema)
	if funcs != "" {
		t.Fatalf("functions left after dropping the model: %s", funcs)
	}
}

// TestPublishAfterKeyChange publishes a version whose key has another name
// and type than the published one's: the views are re-created.
func TestPublishAfterKeyChange(t *testing.T) {
	w := newWorkspace(t)
	w.blobs(t, "pts", []int{20, 20}, 5)
	mustAssort(t, w.args("fit", "keyed", "--query", "SELECT id, x, y FROM "+w.table("pts"), "--key", "id", "--k", "2")...)
	mustAssort(t, w.args("fit", "keyed", "--query", "SELECT 'p' || id AS name, x, y FROM "+w.table("pts"), "--key", "name", "--k", "2")...)
	var keyType string
	w.scalar(t, `SELECT format_type(atttypid, atttypmod) FROM pg_attribute WHERE attrelid = $1::regclass AND attname = 'name'`, &keyType, w.schema+".keyed")
	if keyType != "text" {
		t.Fatalf("view key type %q, want text", keyType)
	}
	mustAssort(t, w.args("publish", "keyed@1")...)
	var n int
	w.scalar(t, "SELECT count(id) FROM "+w.table("keyed"), &n)
	if n != 40 {
		t.Fatalf("view back on v1 has %d ids, want 40", n)
	}
}

// TestStageThenPublish stages rows in an unpublished version with
// score --no-publish, leaves the view alone, and publishes them at once.
func TestStageThenPublish(t *testing.T) {
	w := newWorkspace(t)
	w.blobs(t, "pts", []int{30, 20}, 6)
	q := "SELECT id, x, y FROM " + w.table("pts")
	mustAssort(t, w.args("fit", "stage", "--query", q+" WHERE id <= 40", "--key", "id", "--k", "2")...)
	mustAssort(t, w.args("fit", "stage", "--query", q+" WHERE id <= 40", "--key", "id", "--k", "2", "--no-publish")...)
	mustAssort(t, w.args("score", "stage@2", "--query", q+" WHERE id > 40", "--no-publish")...)
	var shown, staged int
	w.scalar(t, "SELECT count(*) FROM "+w.table("stage"), &shown)
	w.scalar(t, "SELECT count(*) FROM "+w.table("stage_v2"), &staged)
	if shown != 40 || staged != 50 {
		t.Fatalf("view shows %d rows, v2 holds %d; want 40 and 50", shown, staged)
	}
	mustAssort(t, w.args("publish", "stage@2")...)
	w.scalar(t, "SELECT count(*) FROM "+w.table("stage"), &shown)
	if shown != 50 {
		t.Fatalf("after publish the view shows %d rows, want 50", shown)
	}
}

// TestMigrationOrdersPublications upgrades a registry that has
// publications made before migration 6: they are numbered in the order of
// their timestamps (not of their rows), the one in force stays the newest
// by clock, and later publications number on from there.
func TestMigrationOrdersPublications(t *testing.T) {
	w := newWorkspace(t)
	w.blobs(t, "pts", []int{30, 20, 10}, 3)
	q := "SELECT id, x, y FROM " + w.table("pts")
	for range 3 { // life@1, @2, @3, each published in turn
		mustAssort(t, w.args("fit", "life", "--query", q, "--key", "id", "--k", "3")...)
	}
	// Back to the registry as migration 5 left it, with the timestamps
	// saying the publications were made in the order @2, @3, @1.
	pub := w.table("publications")
	w.exec(t, "DROP TABLE "+w.table("retired_versions"))
	w.exec(t, "ALTER TABLE "+pub+" DROP COLUMN seq")
	w.exec(t, "CREATE INDEX publications_name_time ON "+pub+" (name, published_at DESC)")
	w.exec(t, "DELETE FROM "+w.table("migrations")+" WHERE version = 6")
	w.exec(t, "UPDATE "+pub+" SET published_at = timestamptz '2026-01-01' + (((version + 1) % 3) * interval '1 hour')")

	mustAssort(t, w.args("migrate")...)
	var order string
	w.scalar(t, "SELECT string_agg(version || '@' || seq, ',' ORDER BY seq) FROM "+pub, &order)
	if order != "2@1,3@2,1@3" {
		t.Fatalf("publications after the migration (version@seq): %s, want 2@1,3@2,1@3", order)
	}
	code, out, stderr := assort(t, w.args("drop", "life@1")...)
	if code != exitFailure || !strings.Contains(stderr, "published version") {
		t.Fatalf("drop life@1 after the migration: exit %d, want %d, the published version; output:\n%s%s", code, exitFailure, out, stderr)
	}
	mustAssort(t, w.args("publish", "life@2")...)
	w.scalar(t, "SELECT string_agg(version || '@' || seq, ',' ORDER BY seq) FROM "+pub, &order)
	if order != "2@1,3@2,1@3,2@4" {
		t.Fatalf("publications after publishing life@2: %s, want 2@1,3@2,1@3,2@4", order)
	}
	mustAssort(t, w.args("drop", "life@1")...)
}
