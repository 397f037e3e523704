"""Everything castline writes: the run folder (its only writer), the model file, the
run ledger, CSV files that a spreadsheet reads as text, and new files never overwritten."""
