"""The reduce stage: the standard form, one transform object per problem class, the prepared problem."""
