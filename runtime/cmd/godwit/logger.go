package main

import (
	"io"
	"os"

	"go.uber.org/zap"
	"go.uber.org/zap/zapcore"
)

// buildLogger makes the zap logger of the long-running commands: the
// console encoder when w is a terminal (a person reads it), JSON lines
// otherwise (a log collector reads it).
func buildLogger(level string, w io.Writer) (*zap.Logger, error) {
	var lvl zapcore.Level
	if err := lvl.UnmarshalText([]byte(level)); err != nil {
		return nil, usagef("--log-level %q: want debug, info, warn or error", level)
	}
	ec := zap.NewProductionEncoderConfig()
	ec.EncodeTime = zapcore.ISO8601TimeEncoder
	var enc zapcore.Encoder
	if isTerminal(w) {
		ec.EncodeLevel = zapcore.CapitalColorLevelEncoder
		enc = zapcore.NewConsoleEncoder(ec)
	} else {
		enc = zapcore.NewJSONEncoder(ec)
	}
	return zap.New(zapcore.NewCore(enc, zapcore.AddSync(w), lvl)), nil
}

func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}
