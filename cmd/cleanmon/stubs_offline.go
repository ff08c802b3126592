package main

var (
	runLimits  = notYet("limits")
	runPlan    = notYet("plan")
	runCertify = notYet("certify")
)
