"""Review: the close-call queue, review states, decisions and the ledger."""
