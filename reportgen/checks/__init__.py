"""Model checks: plain functions on a pair's rows and draws, composed by the results stage."""
