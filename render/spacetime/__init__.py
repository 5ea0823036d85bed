"""spacetime"""
