package main

import (
	"context"
	"flag"
	"io"
	"log/slog"

	"beamledger/server"
	"beamledger/storage/postgres"
)

func cmdServe(ctx context.Context, args []string, stderr io.Writer) error {
	fs := flag.NewFlagSet("serve", flag.ContinueOnError)
	fs.SetOutput(stderr)
	cfg := server.Defaults()
	finish := serverFlags(fs, &cfg)
	if err := fs.Parse(args); err != nil {
		return err
	}
	if err := finish(); err != nil {
		return err
	}
	log := newLogger(stderr, cfg.LogLevel)
	log.Info("starting beamledger", slog.String("version", buildVersion()), slog.Any("config", cfg))
	db, err := postgres.Open(ctx, cfg.DatabaseURL, 0)
	if err != nil {
		return err
	}
	defer db.Close()
	return server.Run(ctx, cfg, db, log, nil)
}
