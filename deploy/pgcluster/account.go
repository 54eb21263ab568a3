package pgcluster

import (
	"context"
	"fmt"
	"os"
	"os/exec"
	"os/user"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
)

// serverUserName is the account Debian's packages create for the server; it
// is the one a root caller hands the cluster to, because initdb and postgres
// refuse to run as root.
const serverUserName = "postgres"

// account is the operating-system user that runs initdb, pg_ctl and the
// server: the caller itself, or the postgres user when the caller is root.
type account struct {
	cred *syscall.Credential // nil: run as the caller, no switch
}

// serverAccount picks the account for the current process.
func serverAccount() (account, error) {
	if os.Geteuid() != 0 {
		return account{}, nil
	}
	u, err := user.Lookup(serverUserName)
	if err != nil {
		return account{}, fmt.Errorf("running as root needs the %q system user to own the cluster (installing the postgresql package creates it): %w",
			serverUserName, err)
	}
	uid, err := strconv.ParseUint(u.Uid, 10, 32)
	if err != nil {
		return account{}, fmt.Errorf("user %s: uid %q: %w", serverUserName, u.Uid, err)
	}
	gid, err := strconv.ParseUint(u.Gid, 10, 32)
	if err != nil {
		return account{}, fmt.Errorf("user %s: gid %q: %w", serverUserName, u.Gid, err)
	}
	cred := &syscall.Credential{Uid: uint32(uid), Gid: uint32(gid)}
	if ids, err := u.GroupIds(); err == nil {
		for _, id := range ids {
			if g, err := strconv.ParseUint(id, 10, 32); err == nil {
				cred.Groups = append(cred.Groups, uint32(g))
			}
		}
	}
	return account{cred: cred}, nil
}

// switches reports whether commands run as another user than the caller.
func (a account) switches() bool { return a.cred != nil }

// command prepares program to run as the account in dir, with HOME set to
// dir too: root's HOME is unreadable to the postgres user, and the server's
// environment should not depend on the caller's PG* or locale variables.
// Setpgid keeps a Ctrl-C meant for the caller away from the server, which is
// stopped in order by Stop instead.
func (a account) command(ctx context.Context, dir, program string, args ...string) *exec.Cmd {
	cmd := exec.CommandContext(ctx, program, args...)
	cmd.Dir = dir
	cmd.Env = serverEnv(os.Environ(), dir)
	cmd.SysProcAttr = &syscall.SysProcAttr{Credential: a.cred, Setpgid: true}
	return cmd
}

// serverEnv filters the caller's environment for the server's programs.
func serverEnv(environ []string, home string) []string {
	env := make([]string, 0, len(environ)+2)
	for _, kv := range environ {
		name, _, _ := strings.Cut(kv, "=")
		switch {
		case strings.HasPrefix(name, "PG"), strings.HasPrefix(name, "LC_"),
			name == "LANG", name == "LANGUAGE", name == "HOME":
			continue
		}
		env = append(env, kv)
	}
	return append(env, "HOME="+home, "LC_ALL=C")
}

// own hands path to the account; a no-op when there is no switch.
func (a account) own(path string) error {
	if a.cred == nil {
		return nil
	}
	return os.Lchown(path, int(a.cred.Uid), int(a.cred.Gid))
}

// canReach reports whether the account can search every directory from / down
// to dir, which the server needs to open its data directory by path.
func (a account) canReach(dir string) (bool, error) {
	if a.cred == nil {
		return true, nil
	}
	return searchable(dir, a.cred.Uid, append([]uint32{a.cred.Gid}, a.cred.Groups...))
}

// searchable reports whether a process with uid and groups gids may search
// (traverse) every directory on the path to dir, by the classic owner, group,
// other mode bits. It ignores ACLs, which the directories in question (temp
// dirs, home dirs, checkouts) do not use in practice.
func searchable(dir string, uid uint32, gids []uint32) (bool, error) {
	real, err := filepath.EvalSymlinks(dir)
	if err != nil {
		return false, err
	}
	real, err = filepath.Abs(real)
	if err != nil {
		return false, err
	}
	p := real
	for {
		fi, err := os.Stat(p)
		if err != nil {
			return false, err
		}
		st, ok := fi.Sys().(*syscall.Stat_t)
		if !ok {
			return false, fmt.Errorf("%s: no ownership information", p)
		}
		if !modeAllowsSearch(fi.Mode(), st.Uid, st.Gid, uid, gids) {
			return false, nil
		}
		parent := filepath.Dir(p)
		if parent == p {
			return true, nil
		}
		p = parent
	}
}

// modeAllowsSearch applies the kernel's choice of exactly one permission
// class: owner bits for the owner, group bits for a member, else other bits.
func modeAllowsSearch(mode os.FileMode, ownerUID, ownerGID, uid uint32, gids []uint32) bool {
	if uid == 0 {
		return true
	}
	perm := mode.Perm()
	if ownerUID == uid {
		return perm&0o100 != 0
	}
	for _, g := range gids {
		if g == ownerGID {
			return perm&0o010 != 0
		}
	}
	return perm&0o001 != 0
}
