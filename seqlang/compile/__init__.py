"""Program to timeline to hardware plan."""
