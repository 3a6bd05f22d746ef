package main

import (
	"errors"
	"fmt"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/engine"
	"github.com/spf13/cobra"
)

func init() { commands = append(commands, newCheckCmd) }

func newCheckCmd() *cobra.Command {
	var path string
	cmd := &cobra.Command{
		Use:   "check --config FILE",
		Short: "Validate a configuration and print it with every default filled in",
		Long: `check reads a configuration strictly (unknown keys are errors), applies the
defaults, validates it and builds the fusion engine from it, without touching
the network. On success it prints the resolved configuration as YAML; otherwise
it lists every problem as FILE:LINE: field message and exits 2.`,
		Example: "  godwit check --config configs/dock-post.yaml",
		Args:    usageArgs(cobra.NoArgs),
		RunE: func(cmd *cobra.Command, _ []string) error {
			cfg, err := loadConfig(cmd, path)
			if err != nil {
				return err
			}
			out, err := configs.Marshal(cfg)
			if err != nil {
				return fmt.Errorf("printing the configuration: %w", err)
			}
			_, err = cmd.OutOrStdout().Write(out)
			return err
		},
	}
	cmd.Flags().StringVar(&path, "config", "", "configuration file (YAML)")
	_ = cmd.MarkFlagRequired("config")
	return cmd
}

// loadConfig loads and validates a configuration and checks that the engine
// accepts it. Problems are written one per line to the command's error
// stream and returned as a usage error (exit 2).
func loadConfig(cmd *cobra.Command, path string) (*configs.Config, error) {
	if path == "" {
		return nil, usagef("--config is required")
	}
	cfg, err := configs.Load(path)
	if err != nil {
		var list *configs.ErrorList
		if errors.As(err, &list) {
			for _, e := range list.Errors {
				fmt.Fprintln(cmd.ErrOrStderr(), e)
			}
			return nil, usagef("%s: %d problem(s)", path, len(list.Errors))
		}
		return nil, usageError{err}
	}
	// Some choices only the engine can judge (e.g. a filter that needs
	// linear sensors); a configuration check that passed them would lie.
	if _, err := engine.New(cfg, engine.Options{}); err != nil {
		return nil, usagef("%s: %v", path, err)
	}
	return cfg, nil
}
