package cli

import (
	"errors"
	"fmt"
	"log/slog"
	"os"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog"
)

func newMasterKeyCmd(e *env) *cobra.Command {
	c := &cobra.Command{Use: "master-key", Short: "Rotate the master key that seals the projects' pseudonym keys"}
	var dir, masterFile, newFile string
	rotate := &cobra.Command{
		Use:   "rotate --data DIR [--master-key FILE] [--new-master-key FILE]",
		Short: "Re-seal every project key under a new master key (server stopped); pseudonyms and data stay as they are",
		Long: `Re-seal every project key under a new master key, in one transaction: the project keys,
their ids and every pseudonym stay the same and no data file is touched; the catalog opens only
under the new key afterwards. The current key is found as serve finds it. The new key is read
from --new-master-key FILE, or made and written there (0600) if FILE does not exist. With the
current key in DIR/master.key and no --new-master-key, the new key replaces DIR/master.key (it is
written to DIR/master.key.new first, and renamed once the catalog is re-sealed).`,
		Args: cobra.NoArgs,
		RunE: onData("master-key rotate", &dir, func(cmd *cobra.Command, args []string, d dataDir) error {
			oldKey, from, err := d.findMasterKey(masterFile)
			if err != nil {
				return err
			}
			replace := newFile == "" && from == d.masterKey()
			if newFile == "" {
				if !replace {
					return usageErr("master-key rotate: the current key comes from %s; give --new-master-key FILE for the new one", from)
				}
				newFile = d.masterKey() + ".new"
			}
			newKey, err := anonymize.LoadMasterKeyFile(newFile)
			if errors.Is(err, os.ErrNotExist) {
				if newKey, err = anonymize.GenerateMasterKey(); err == nil {
					err = anonymize.WriteMasterKeyFile(newFile, newKey)
				}
			}
			if err != nil {
				return fmt.Errorf("master-key rotate: %w", err)
			}
			st, err := d.openStore(oldKey, slog.New(slog.DiscardHandler))
			if errors.Is(err, catalog.ErrLocked) {
				return fmt.Errorf("%w: stop the server first", err)
			}
			if err != nil {
				return err
			}
			n, err := st.RotateMasterKey(cmd.Context(), newKey, operator)
			if cerr := st.Close(); err == nil {
				err = cerr
			}
			if err != nil {
				return usageErr("%v", err)
			}
			if replace {
				if err := os.Rename(newFile, d.masterKey()); err != nil {
					return fmt.Errorf("master-key rotate: the catalog is sealed under %s, which is in %s: move it to %s: %w", newKey.ID(), newFile, d.masterKey(), err)
				}
				newFile = d.masterKey()
			}
			fmt.Fprintf(e.stdout, "re-sealed %d project keys under master key %s (in %s); the catalog opens with it only from now on: keep a copy where the old one was kept\n", n, newKey.ID(), newFile)
			return nil
		}),
	}
	f := rotate.Flags()
	f.StringVar(&dir, "data", "", "data directory (server stopped)")
	f.StringVar(&masterFile, "master-key", "", "the current master key file (else as serve finds it)")
	f.StringVar(&newFile, "new-master-key", "", "the new master key file, made if it does not exist")
	c.AddCommand(rotate)
	return c
}
