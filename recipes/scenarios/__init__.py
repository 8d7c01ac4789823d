"""Our demo scenarios: seeded data generators that import ``thermoseed.pretrain`` only."""
