package main

import (
	"bufio"
	"context"
	"crypto/rand"
	"encoding/base64"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	"beamledger/accounts"
	"beamledger/storage/postgres"
)

func openDB(ctx context.Context) (*postgres.DB, error) {
	url, err := databaseURL()
	if err != nil {
		return nil, err
	}
	return postgres.Open(ctx, url, 4)
}

func cmdMigrate(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	if len(args) != 1 || (args[0] != "up" && args[0] != "status") {
		return errors.New("usage: beamledger migrate up|status")
	}
	db, err := openDB(ctx)
	if err != nil {
		return err
	}
	defer db.Close()
	if args[0] == "up" {
		st, err := db.Migrate(ctx, newLogger(stderr, logLevelFromEnv()))
		if err != nil {
			return err
		}
		fmt.Fprintf(stdout, "schema at version %d\n", st.Current)
		return nil
	}
	lines, err := db.MigrationStatus(ctx)
	if err != nil {
		return err
	}
	for _, l := range lines {
		fmt.Fprintln(stdout, l)
	}
	return nil
}

// subcommand parses flags for `beamledger GROUP ACTION`.
func subcommand(group string, args []string, actions string, stderr io.Writer) (string, *flag.FlagSet, []string, error) {
	if len(args) == 0 || strings.HasPrefix(args[0], "-") {
		return "", nil, nil, fmt.Errorf("usage: beamledger %s %s [flags]", group, actions)
	}
	fs := flag.NewFlagSet(group+" "+args[0], flag.ContinueOnError)
	fs.SetOutput(stderr)
	return args[0], fs, args[1:], nil
}

// readPassword takes a new password from the first line of stdin, or makes one.
func readPassword(stdin io.Reader, generate bool, stdout io.Writer) (string, error) {
	if generate {
		b := make([]byte, 18)
		if _, err := rand.Read(b); err != nil {
			return "", err
		}
		pw := base64.RawURLEncoding.EncodeToString(b)
		fmt.Fprintln(stdout, "generated password:", pw)
		return pw, nil
	}
	line, err := bufio.NewReader(stdin).ReadString('\n')
	if err != nil && !errors.Is(err, io.EOF) {
		return "", err
	}
	pw := strings.TrimRight(line, "\r\n")
	if pw == "" {
		return "", errors.New("give the new password on standard input, or use -generate-password")
	}
	return pw, nil
}

func cmdUser(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	action, fs, rest, err := subcommand("user", args, "create|set-role|disable|reset-password", stderr)
	if err != nil {
		return err
	}
	email := fs.String("email", "", "the user's email")
	name := fs.String("name", "", "display name (create)")
	role := fs.String("role", "", "manager, staff, researcher or auditor (create, set-role)")
	orcid := fs.String("orcid", "", "ORCID iD (create, optional)")
	generate := fs.Bool("generate-password", false, "make a random password and print it (create, reset-password)")
	if err := fs.Parse(rest); err != nil {
		return err
	}
	db, err := openDB(ctx)
	if err != nil {
		return err
	}
	defer db.Close()
	hasher := accounts.NewPasswordHasher(accounts.DefaultPasswordParams(), 1)
	normalized, err := accounts.NormalizeEmail(*email)
	if err != nil {
		return err
	}
	switch action {
	case "create":
		pw, err := readPassword(os.Stdin, *generate, stdout)
		if err != nil {
			return err
		}
		n := accounts.NewUser{Email: normalized, DisplayName: *name, Role: accounts.Role(*role), ORCID: *orcid, Password: pw}
		if err := n.Normalize(accounts.MinPasswordLength); err != nil {
			return err
		}
		h, err := hasher.Hash(ctx, pw)
		if err != nil {
			return err
		}
		u, err := db.CreateUser(ctx, n, h)
		if err != nil {
			return err
		}
		fmt.Fprintf(stdout, "created %s %s (%s)\n", u.Role, u.Email, u.ID)
		return nil
	case "set-role", "disable":
		cred, err := db.CredentialsByEmail(ctx, normalized)
		if err != nil {
			return err
		}
		var p accounts.UserPatch
		if action == "disable" {
			yes := true
			p.Disabled = &yes
		} else {
			r, err := accounts.ParseRole("role", *role)
			if err != nil {
				return err
			}
			p.Role = &r
		}
		u, err := db.UpdateUser(ctx, cred.User.ID, p)
		if err != nil {
			return err
		}
		fmt.Fprintf(stdout, "%s: role %s, disabled %t\n", u.Email, u.Role, u.Disabled)
		return nil
	case "reset-password":
		cred, err := db.CredentialsByEmail(ctx, normalized)
		if err != nil {
			return err
		}
		pw, err := readPassword(os.Stdin, *generate, stdout)
		if err != nil {
			return err
		}
		if err := accounts.CheckPasswordPolicy(pw, accounts.MinPasswordLength); err != nil {
			return err
		}
		h, err := hasher.Hash(ctx, pw)
		if err != nil {
			return err
		}
		if err := db.SetPasswordHash(ctx, cred.User.ID, h, true); err != nil {
			return err
		}
		fmt.Fprintf(stdout, "password of %s reset; their sessions are ended\n", cred.User.Email)
		return nil
	}
	return fmt.Errorf("unknown action %q: use create, set-role, disable or reset-password", action)
}

func cmdToken(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	action, fs, rest, err := subcommand("token", args, "create|revoke", stderr)
	if err != nil {
		return err
	}
	instrument := fs.String("instrument", "", "instrument code")
	name := fs.String("name", "", "what the token is for, e.g. the acquisition computer (create)")
	scopes := fs.String("scopes", "instrument:read,usage:write,acquisition:write,file:write", "comma-separated scopes (create)")
	by := fs.String("created-by", "", "email of the manager issuing the token (create)")
	valid := fs.Duration("valid-for", 0, "lifetime, e.g. 8760h; 0 for no expiry (create)")
	id := fs.String("id", "", "token id (revoke)")
	if err := fs.Parse(rest); err != nil {
		return err
	}
	db, err := openDB(ctx)
	if err != nil {
		return err
	}
	defer db.Close()
	in, err := db.InstrumentByCode(ctx, strings.ToUpper(*instrument))
	if err != nil {
		return err
	}
	now := time.Now()
	switch action {
	case "create":
		email, err := accounts.NormalizeEmail(*by)
		if err != nil {
			return fmt.Errorf("-created-by: %w", err)
		}
		cred, err := db.CredentialsByEmail(ctx, email)
		if err != nil {
			return err
		}
		if cred.User.Role != accounts.RoleManager {
			return fmt.Errorf("-created-by must name a manager; %s is %s", email, cred.User.Role)
		}
		n := accounts.NewAgentToken{InstrumentID: in.ID, Name: *name}
		for _, s := range strings.Split(*scopes, ",") {
			n.Scopes = append(n.Scopes, accounts.Scope(strings.TrimSpace(s)))
		}
		if *valid > 0 {
			exp := now.Add(*valid)
			n.ExpiresAt = &exp
		}
		if err := n.Normalize(now); err != nil {
			return err
		}
		secret, hash, err := accounts.NewOpaqueToken(accounts.AgentTokenPrefix)
		if err != nil {
			return err
		}
		t, err := db.CreateAgentToken(ctx, n, cred.User.ID, hash)
		if err != nil {
			return err
		}
		fmt.Fprintf(stdout, "token %s for %s (shown once; store it on the instrument computer):\n%s\n", t.ID, in.Code, secret)
		return nil
	case "revoke":
		t, err := db.RevokeAgentToken(ctx, in.ID, *id, now)
		if err != nil {
			return err
		}
		fmt.Fprintf(stdout, "token %s of %s revoked at %s\n", t.ID, in.Code, t.RevokedAt.UTC().Format(time.RFC3339))
		return nil
	}
	return fmt.Errorf("unknown action %q: use create or revoke", action)
}
