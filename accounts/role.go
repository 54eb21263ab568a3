package accounts

import (
	"slices"

	"beamledger"
)

// Role is what a user may do facility-wide. Agents are not users and have no Role.
type Role string

// The user roles, from the glossary.
const (
	// RoleManager runs the facility: rates, users, projects, policy.
	RoleManager Role = "manager"
	// RoleStaff operates instruments, trains and assists researchers, grants qualifications.
	RoleStaff Role = "staff"
	// RoleResearcher books time and records data for the projects they belong to.
	RoleResearcher Role = "researcher"
	// RoleAuditor reads everything needed to trace a record and changes nothing.
	RoleAuditor Role = "auditor"
)

// Roles lists every user role, in order of decreasing reach.
var Roles = []Role{RoleManager, RoleStaff, RoleResearcher, RoleAuditor}

// Valid reports whether r is one of Roles.
func (r Role) Valid() bool { return slices.Contains(Roles, r) }

// ParseRole checks s names a role; field is the JSON field to blame.
func ParseRole(field, s string) (Role, error) {
	r := Role(s)
	if !r.Valid() {
		return "", beamledger.InvalidField(field, "must be one of manager, staff, researcher, auditor")
	}
	return r, nil
}

// FacilityWide reports whether the role acts on every project's objects, not only its own.
func (r Role) FacilityWide() bool { return r == RoleManager || r == RoleStaff }
