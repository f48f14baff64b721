"""sweeprig.engine"""
