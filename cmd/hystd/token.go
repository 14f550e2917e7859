package main

import (
	"crypto/rand"
	"encoding/base64"
	"fmt"

	"github.com/spf13/cobra"

	"hystd/acq/api"
)

func init() { register(newTokenCmd) }

// tokenBytes is the randomness of a token made by `hystd token`: 256 bits,
// so that a plain SHA-256 of it is safe to store (see api.Credential).
const tokenBytes = 32

func newTokenCmd() *cobra.Command {
	var name, role string
	cmd := &cobra.Command{
		Use:   "token --name NAME --role review|operate|admin",
		Short: "Make an API token for a user and the line of the users file that admits it",
		Long: "token makes a random token of 256 bits for a user of the API and prints it once, with\n" +
			"the entry of the users file (http.users_file, kind: users) that holds only its SHA-256.\n" +
			"Give the token to the user; put the entry in the users file; restart the daemon.\n" +
			"Roles: review (read), operate (also start and abort runs, confirm mounts, import),\n" +
			"admin (also requeue the outbox and config-changing actions).",
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			switch role {
			case "review", "operate", "admin":
			default:
				return &exitError{code: exitUsage, err: fmt.Errorf("--role %q: want review, operate or admin", role)}
			}
			if name == "" {
				return &exitError{code: exitUsage, err: fmt.Errorf("--name is required")}
			}
			b := make([]byte, tokenBytes)
			if _, err := rand.Read(b); err != nil {
				return err
			}
			tok := base64.RawURLEncoding.EncodeToString(b)
			out := cmd.OutOrStdout()
			fmt.Fprintf(out, "token for %s (shown once; hystd keeps only its hash):\n%s\n\n", name, tok)
			fmt.Fprintf(out, "entry of the users file:\n  - {name: %s, role: %s, token_sha256: %s}\n", name, role, api.TokenHash(tok))
			return nil
		},
	}
	cmd.Flags().StringVar(&name, "name", "", "the user's name, recorded with every run they start or change")
	cmd.Flags().StringVar(&role, "role", "", "review, operate or admin")
	return cmd
}
