// Command padline runs end-of-line tests of firmware-free capacitive touch
// switches: it finds each unit's trip capacitance on a relay-switched
// capacitor ladder, judges it against limits from the circuit's timing model,
// and logs every serial's result to a SQLite shift log.
//
// This package is CLI wiring only: cobra commands with their flags and
// help, printing, and the mapping of errors to exit codes. Every rule of the
// product (configuration, the gate, the unit loop, limits, drift analysis,
// the demo shift, studies, status, history views) lives in the library
// packages below it (DEVELOPERS.md "Package map").
//
// Inside the package, files depend one way, top to bottom:
//
//  1. the process and the command tree: main.go (signals, exit codes),
//     root.go, commands.go (the list of command families), help_topics.go
//     (the file-format help topics);
//  2. command families, each a builder with its flags and help, a call into
//     the library and the printing of its answer:
//     limits.go; demo_cmd.go; history_cmd.go; drift_cmd.go with
//     drift_study.go and drift_baseline.go; run.go with run_screen.go; station_cmd.go (the
//     family and the bench its check and study share) with
//     station_study_cmd.go and station_status_cmd.go; bringup_cmd.go.
//     A family uses its own files and floor 3, never another family;
//  3. helpers that know no command: shiftlog.go (where the shift log is),
//     progress.go (terminal bar), version.go, gpio.go (the GPIO opener),
//     flags.go (flags shared by several families),
//     testhook.go (the torture test's unit hold).
package main
