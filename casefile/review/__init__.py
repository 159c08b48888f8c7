"""Second reads: sampling plans, reader verdicts and agreement statistics over the ledger."""
