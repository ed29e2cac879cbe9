"""The numerical core: tables in, predictions with reports out. No web code lives here."""
