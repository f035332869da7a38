// Package schema owns the names and DDL of everything assort creates in the
// database and the registry that records it.
//
// For a model NAME in registry schema S (default "assort"), version V:
//
//	S.models, S.components, S.publications   the registry (see migrations)
//	S.NAME_vV                                per-row results of version V
//	S.NAME_vV_memberships                    per-row, per-component probabilities (mixtures)
//	S.NAME                                   view on the published version's results
//	S.NAME_memberships                       view on its memberships (mixtures)
//
// Model names match ^[a-z][a-z0-9_]{0,39}$ and may not collide with the
// registry's tables or with the names above of another model, so every
// relation name fits PostgreSQL's 63-byte limit. Every name built at run
// time reaches SQL through pgx.Identifier, never by string pasting.
//
// Every call that does I/O takes a context first.
package schema
