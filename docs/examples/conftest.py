# A downstream project picks its hypothesis profile the same way bvpkit does.
from bvpkit.testing import register_profiles

register_profiles(default="dev")
