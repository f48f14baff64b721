"""sweeprig.transport"""
