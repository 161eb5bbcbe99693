package main

import (
	"encoding/json"
	"fmt"
	"os"
	"runtime"
	"runtime/pprof"

	"github.com/topostate/topostate/ingest"
)

// startProfiles starts a CPU profile into cpuPath (none when empty) and
// returns the function that stops it and writes a heap profile into its
// memPath argument (none when empty).
func startProfiles(cpuPath string) (stop func(memPath string) error, err error) {
	var cpu *os.File
	if cpuPath != "" {
		cpu, err = os.Create(cpuPath)
		if err != nil {
			return nil, fmt.Errorf("topostate: cpu profile: %w", err)
		}
		if err := pprof.StartCPUProfile(cpu); err != nil {
			cpu.Close()
			return nil, fmt.Errorf("topostate: cpu profile: %w", err)
		}
	}
	return func(memPath string) error {
		if cpu != nil {
			pprof.StopCPUProfile()
			if err := cpu.Close(); err != nil {
				return fmt.Errorf("topostate: cpu profile: %w", err)
			}
		}
		if memPath == "" {
			return nil
		}
		f, err := os.Create(memPath)
		if err != nil {
			return fmt.Errorf("topostate: heap profile: %w", err)
		}
		runtime.GC()
		if err := pprof.WriteHeapProfile(f); err != nil {
			f.Close()
			return fmt.Errorf("topostate: heap profile: %w", err)
		}
		return f.Close()
	}, nil
}

// timings is the JSON the benchmark harness reads (scripts/bench).
type timings struct {
	Subjects    int                `json:"subjects"`
	Regions     int                `json:"regions"`
	States      int                `json:"states"`
	Windows     int64              `json:"windows"`
	FitWindows  int                `json:"fit_windows"`
	Phases      []ingest.PhaseTime `json:"phases"`
	WorkerTimes []ingest.PhaseTime `json:"worker_times"`
	Fits        []ingest.FitStat   `json:"fits"`
	Workers     int                `json:"gomaxprocs"`
}

func writeTimings(path string, s *ingest.Summary) error {
	t := timings{Subjects: s.Subjects, Regions: s.Regions, States: s.States, Windows: s.Windows,
		FitWindows: s.FitWindows, Phases: s.PhaseTimes, WorkerTimes: s.WorkerTimes, Fits: s.Fits,
		Workers: runtime.GOMAXPROCS(0)}
	b, err := json.MarshalIndent(t, "", "  ")
	if err != nil {
		return fmt.Errorf("topostate: timings: %w", err)
	}
	if err := os.WriteFile(path, append(b, '\n'), 0o644); err != nil {
		return fmt.Errorf("topostate: timings: %w", err)
	}
	return nil
}
