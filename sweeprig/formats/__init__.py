"""sweeprig.formats"""
