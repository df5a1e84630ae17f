package drift_test

import "flag"

var studyFlag = flag.Bool("study", false, "print the run-length study table")
