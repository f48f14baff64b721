"""sweeprig.store"""
