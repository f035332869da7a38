package schema

import (
	"fmt"
	"regexp"
	"strconv"
	"strings"

	"github.com/jackc/pgx/v5"
)

// DefaultSchema is the registry schema when none is given.
const DefaultSchema = "assort"

var (
	modelName  = regexp.MustCompile(`^[a-z][a-z0-9_]{0,39}$`)
	schemaName = regexp.MustCompile(`^[a-z_][a-z0-9_]{0,62}$`)
	// versionSuffix matches names that would collide with another model's
	// version tables or membership views.
	versionSuffix = regexp.MustCompile(`_v[0-9]+(_memberships)?$|_memberships$`)
)

// registryTables are the registry's own relations; no model may take these
// names.
var registryTables = []string{"models", "components", "publications", "migrations", "candidates", "comparisons", "comparison_cells", "scorings", "retired_versions"}

// ValidateModelName reports why name cannot name a model, or nil.
func ValidateModelName(name string) error {
	if !modelName.MatchString(name) {
		return fmt.Errorf("model name %q: use 1 to 40 characters, lower-case letters, digits and underscores, starting with a letter", name)
	}
	for _, t := range registryTables {
		if name == t {
			return fmt.Errorf("model name %q is taken by a registry table; choose another", name)
		}
	}
	if versionSuffix.MatchString(name) {
		return fmt.Errorf("model name %q ends like a version table or membership view (_vN, _memberships); choose another", name)
	}
	return nil
}

// ValidateSchemaName reports why name cannot name the registry schema, or nil.
func ValidateSchemaName(name string) error {
	if !schemaName.MatchString(name) || strings.HasPrefix(name, "pg_") {
		return fmt.Errorf("schema name %q: use lower-case letters, digits and underscores, at most 63, not starting with pg_", name)
	}
	return nil
}

// Version names one version of a model in a registry schema.
type Version struct {
	Schema string
	Model  string
	N      int
}

func (v Version) String() string { return v.Model + "@" + strconv.Itoa(v.N) }

// Results is the version's per-row result table.
func (v Version) Results() pgx.Identifier {
	return pgx.Identifier{v.Schema, v.Model + "_v" + strconv.Itoa(v.N)}
}

// Memberships is the version's per-row, per-component probability table.
func (v Version) Memberships() pgx.Identifier {
	return pgx.Identifier{v.Schema, v.Model + "_v" + strconv.Itoa(v.N) + "_memberships"}
}

// Tables are v's results table and, withMemberships, its memberships
// table.
func (v Version) Tables(withMemberships bool) []pgx.Identifier {
	if withMemberships {
		return []pgx.Identifier{v.Results(), v.Memberships()}
	}
	return []pgx.Identifier{v.Results()}
}

// View is the stable view on the published version's results.
func View(schema, model string) pgx.Identifier { return pgx.Identifier{schema, model} }

// MembershipsView is the stable view on the published version's memberships.
func MembershipsView(schema, model string) pgx.Identifier {
	return pgx.Identifier{schema, model + "_memberships"}
}

// ParseRef splits "NAME" or "NAME@VERSION"; version 0 means "the published
// one".
func ParseRef(ref string) (name string, version int, err error) {
	name = ref
	for i := 0; i < len(ref); i++ {
		if ref[i] == '@' {
			name = ref[:i]
			v, err := strconv.Atoi(ref[i+1:])
			if err != nil || v < 1 {
				return "", 0, fmt.Errorf("model reference %q: the version after @ must be a whole number from 1", ref)
			}
			version = v
			break
		}
	}
	if err := ValidateModelName(name); err != nil {
		return "", 0, err
	}
	return name, version, nil
}
