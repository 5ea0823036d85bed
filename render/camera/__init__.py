"""camera"""
