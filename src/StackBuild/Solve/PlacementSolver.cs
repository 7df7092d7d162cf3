namespace StackBuild.Solve;

/// <summary>How the sections' placements are solved from the pairs.</summary>
public enum PlacementSolver
{
    /// <summary>The neighbour chain (<see cref="ChainSolver"/>): each section placed through its best confident neighbour.</summary>
    Chain,
    /// <summary>The chain, then all placements solved at once from every first- and second-neighbour pair (<see cref="SmoothingSolver"/>).</summary>
    Smoothing,
}

/// <summary>Look-ups over a solved chain.</summary>
public static class ChainPlacements
{
    /// <summary>Index of the section the chain was built from (route <see cref="LinkRoute.Reference"/>).</summary>
    public static int ReferenceIndex(IReadOnlyList<ChainPlacement> chain)
    {
        for (int i = 0; i < chain.Count; i++)
            if (chain[i].Route == LinkRoute.Reference) return i;
        throw new ArgumentException("the chain has no reference section", nameof(chain));
    }
}
