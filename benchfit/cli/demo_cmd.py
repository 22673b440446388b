"""(commands registered here by their module owner)"""
