namespace Bitbudget.Search.Planning;

/// <summary>
/// Exact multiple-choice knapsack over the additive error model, solved as a Pareto-set dynamic
/// programme: after each layer only the non-dominated (bytes, error) pairs of the layers so far are
/// kept, so the last step holds the whole size-vs-error frontier. Budgeted queries also drop partial
/// points that cannot meet the budget even with the cheapest remaining choices, which keeps them exact
/// and small. Only when a frontier outgrows its point cap are points thinned (see <see cref="FrontierResult"/>).
/// </summary>
public static class KnapsackSolver
{
    /// <summary>Frontier points a budgeted query keeps per layer before thinning starts (its core is small; see <see cref="KnapsackCore"/>).</summary>
    public const int DefaultMaxPoints = 20_000;

    /// <summary>
    /// Memory the whole frontier's back-pointers and working buffers may take. <see cref="Frontier(IReadOnlyList{PlanningLayer})"/>
    /// keeps every Pareto point while the frontier fits in it and thins only beyond it (never below
    /// <see cref="DefaultMaxPoints"/> points per layer). Time grows with the points kept, so this is kept modest: only
    /// 400 frontier points are ever written (<see cref="SearchReport.MaxFrontierPoints"/>).
    /// </summary>
    public const long DefaultFrontierMemoryBytes = 64L << 20;

    // Per point: 4 bytes of back-pointer for each layer still to come, and bytes, error and pointer in three working buffers.
    private const int BackPointerBytes = sizeof(uint);
    private const int WorkingBytesPerPoint = 3 * (sizeof(long) + sizeof(double) + sizeof(uint));

    internal const int ChoiceBits = 5;
    internal const uint ChoiceMask = (1u << ChoiceBits) - 1;

    // Parent indices share a uint with the choice, so frontiers larger than this cannot be addressed.
    private const int MaxPointsLimit = 1 << (32 - ChoiceBits);

    // Pruning against a budget adds a partial sum to a suffix sum computed in another order; this
    // slack (relative) keeps rounding from pruning a point whose true layer-order sum fits.
    private const double PruneSlack = 1e-9;

    /// <summary>The assignment with the fewest bytes whose summed error is at most <paramref name="maxError"/>; null when even the least-error assignment exceeds it.</summary>
    public static Selection? MinimumBytes(IReadOnlyList<PlanningLayer> layers, double maxError) =>
        MinimumBytes(layers, maxError, DefaultMaxPoints);

    /// <summary>As <see cref="MinimumBytes(IReadOnlyList{PlanningLayer}, double)"/> with a chosen frontier cap (tests force thinning with it).</summary>
    internal static Selection? MinimumBytes(IReadOnlyList<PlanningLayer> layers, double maxError, int maxPoints)
    {
        PlanningInput.Validate(layers);
        if (double.IsNaN(maxError))
        {
            throw new EngineException("invalid-error-budget", "The error budget is not a number.");
        }

        // The greedy answer is a feasible incumbent: partial points that provably cannot beat it are
        // dropped, which keeps the programme small on models with many layers.
        Selection greedy = GreedySolver.MinimumBytes(layers, maxError);
        if (greedy.Error > maxError)
        {
            return null;
        }

        var bound = LagrangeBound.ForMinimumBytes(layers, maxError, greedy.Bytes);
        var core = KnapsackCore.Of(layers, bound);
        FrontierResult frontier = Solve(core.Layers, long.MaxValue, maxError, CheckedCap(maxPoints), bound);
        int index = frontier.IndexOfMinimumBytes(maxError);
        return Better(index < 0 ? null : core.Original(frontier[index]), greedy, byBytes: true, frontier.Exact);
    }

    /// <summary>The assignment with the least summed error whose bytes are at most <paramref name="maxBytes"/>; null when even the smallest assignment exceeds it.</summary>
    public static Selection? MinimumError(IReadOnlyList<PlanningLayer> layers, long maxBytes) =>
        MinimumError(layers, maxBytes, DefaultMaxPoints);

    /// <summary>As <see cref="MinimumError(IReadOnlyList{PlanningLayer}, long)"/> with a chosen frontier cap (tests force thinning with it).</summary>
    internal static Selection? MinimumError(IReadOnlyList<PlanningLayer> layers, long maxBytes, int maxPoints)
    {
        PlanningInput.Validate(layers);
        Selection greedy = GreedySolver.MinimumError(layers, maxBytes);
        if (greedy.Bytes > maxBytes)
        {
            return null;
        }

        var bound = LagrangeBound.ForMinimumError(layers, maxBytes, greedy.Error);
        var core = KnapsackCore.Of(layers, bound);
        FrontierResult frontier = Solve(core.Layers, maxBytes, double.PositiveInfinity, CheckedCap(maxPoints), bound);
        int index = frontier.IndexOfMinimumError(maxBytes);
        return Better(index < 0 ? null : core.Original(frontier[index]), greedy, byBytes: false, frontier.Exact);
    }

    /// <summary>
    /// Every Pareto-optimal (bytes, error) assignment, sorted by bytes: exact while the frontier fits in
    /// <see cref="DefaultFrontierMemoryBytes"/>, thinned beyond it (<see cref="FrontierResult.Exact"/> says which).
    /// </summary>
    public static FrontierResult Frontier(IReadOnlyList<PlanningLayer> layers) => Frontier(layers, MaxPointsLimit, DefaultFrontierMemoryBytes);

    /// <summary>The frontier, thinned only when it would hold more than <paramref name="maxPoints"/> points.</summary>
    public static FrontierResult Frontier(IReadOnlyList<PlanningLayer> layers, int maxPoints) => Frontier(layers, maxPoints, DefaultFrontierMemoryBytes);

    /// <summary>The frontier, thinned only beyond <paramref name="maxPoints"/> points or beyond <paramref name="memoryBytes"/> of memory.</summary>
    public static FrontierResult Frontier(IReadOnlyList<PlanningLayer> layers, int maxPoints, long memoryBytes)
    {
        PlanningInput.Validate(layers);
        return Solve(layers, long.MaxValue, double.PositiveInfinity, CheckedCap(maxPoints), bound: null, memoryBytes);
    }

    private static int CheckedCap(int maxPoints) =>
        maxPoints is >= 2 and <= MaxPointsLimit
            ? maxPoints
            : throw new EngineException("invalid-frontier-cap", $"The frontier cap must be 2..{MaxPointsLimit} points; got {maxPoints}.");

    /// <summary>
    /// The programme's answer, or the greedy incumbent when the programme found nothing better. Exact
    /// runs always find the optimum (never worse than greedy); a thinned run may not, and then the
    /// better of the two is returned, still marked as thinned.
    /// </summary>
    private static Selection Better(Selection? programme, Selection greedy, bool byBytes, bool exact)
    {
        if (programme is null)
        {
            return greedy with { Thinned = !exact };
        }

        bool greedyWins = byBytes
            ? greedy.Bytes < programme.Bytes || (greedy.Bytes == programme.Bytes && greedy.Error < programme.Error)
            : greedy.Error < programme.Error || (greedy.Error == programme.Error && greedy.Bytes < programme.Bytes);
        return greedyWins ? greedy with { Thinned = !exact } : programme;
    }

    private static FrontierResult Solve(IReadOnlyList<PlanningLayer> layers, long maxBytes, double maxError, int maxPoints, LagrangeBound? bound, long memoryBytes = DefaultFrontierMemoryBytes)
    {
        int layerCount = layers.Count;
        var suffixBytes = new long[layerCount + 1];
        var suffixError = new double[layerCount + 1];
        for (int i = layerCount - 1; i >= 0; i--)
        {
            long minBytes = long.MaxValue;
            double minError = double.PositiveInfinity;
            foreach (PlanningChoice c in layers[i].Choices)
            {
                minBytes = Math.Min(minBytes, c.Bytes);
                minError = Math.Min(minError, c.Error);
            }

            suffixBytes[i] = checked(suffixBytes[i + 1] + minBytes);
            suffixError[i] = suffixError[i + 1] + minError;
        }

        double errorCut = double.IsPositiveInfinity(maxError)
            ? double.PositiveInfinity
            : maxError + (PruneSlack * (Math.Abs(maxError) + suffixError[0]));

        var current = new PointBuffer(1);
        current.Add(0, 0.0, 0);
        var merged = new PointBuffer(16);
        var scratch = new PointBuffer(16);
        var back = new uint[layerCount][];
        bool exact = true;
        double factor = 1.0;
        long usedBytes = 0;

        for (int layer = 0; layer < layerCount; layer++)
        {
            int[] order = ParetoChoices(layers[layer].Choices);
            long bytesRoom = maxBytes == long.MaxValue ? long.MaxValue : maxBytes - suffixBytes[layer + 1];
            double errorRoom = errorCut - suffixError[layer + 1];

            merged.Clear();
            foreach (int choiceIndex in order)
            {
                PlanningChoice choice = layers[layer].Choices[choiceIndex];
                (int from, int to) = FeasibleParents(current, choice, bytesRoom, errorRoom);
                if (from >= to)
                {
                    continue;
                }

                scratch.Clear();
                MergeInto(merged, current, from, to, choice, (uint)choiceIndex, scratch);
                (merged, scratch) = (scratch, merged);
            }

            if (bound is not null)
            {
                DropHopeless(merged, bound, layer + 1);
            }

            // What still fits: this layer's points and as many for each layer after it, within the memory left.
            int remaining = layerCount - layer;
            long fits = Math.Max(2, (memoryBytes - usedBytes) / ((long)BackPointerBytes * remaining + WorkingBytesPerPoint));
            // Never fewer than the fixed cap of old (DefaultMaxPoints), so a long model keeps at least that frontier.
            int cap = (int)Math.Min(maxPoints, Math.Max(fits, DefaultMaxPoints));
            if (merged.Count > cap)
            {
                factor *= 1.0 + Thin(merged, cap);
                exact = false;
            }

            back[layer] = merged.Pack.AsSpan(0, merged.Count).ToArray();
            usedBytes += (long)BackPointerBytes * merged.Count;
            (current, merged) = (merged, current);
            if (current.Count == 0)
            {
                break;
            }
        }

        return new FrontierResult(
            back,
            current.Bytes.AsSpan(0, current.Count).ToArray(),
            current.Errors.AsSpan(0, current.Count).ToArray(),
            exact,
            factor);
    }

    private static void DropHopeless(PointBuffer points, LagrangeBound bound, int nextLayer)
    {
        int kept = 0;
        for (int i = 0; i < points.Count; i++)
        {
            if (!bound.CannotImprove(nextLayer, points.Bytes[i], points.Errors[i]))
            {
                points.Bytes[kept] = points.Bytes[i];
                points.Errors[kept] = points.Errors[i];
                points.Pack[kept] = points.Pack[i];
                kept++;
            }
        }

        points.Count = kept;
    }

    /// <summary>
    /// A layer's own Pareto set of choices, cheapest first: a choice with at least the bytes and the
    /// error of another can never be on the frontier. Ties keep the higher bit width, then the lower index.
    /// </summary>
    private static int[] ParetoChoices(IReadOnlyList<PlanningChoice> choices)
    {
        var order = new int[choices.Count];
        for (int i = 0; i < order.Length; i++)
        {
            order[i] = i;
        }

        Array.Sort(order, (a, b) =>
        {
            PlanningChoice x = choices[a], y = choices[b];
            int c = x.Bytes.CompareTo(y.Bytes);
            if (c == 0) c = x.Error.CompareTo(y.Error);
            if (c == 0) c = y.Bits.CompareTo(x.Bits);
            return c == 0 ? a.CompareTo(b) : c;
        });

        int kept = 0;
        double lastError = double.PositiveInfinity;
        foreach (int index in order)
        {
            if (choices[index].Error < lastError)
            {
                order[kept++] = index;
                lastError = choices[index].Error;
            }
        }

        return order.AsSpan(0, kept).ToArray();
    }

    /// <summary>
    /// The contiguous run of parent points that can still meet the budgets with this choice: parents
    /// are sorted by bytes ascending and error descending, so the error room cuts a prefix and the bytes
    /// room cuts a suffix.
    /// </summary>
    private static (int From, int To) FeasibleParents(PointBuffer parents, PlanningChoice choice, long bytesRoom, double errorRoom)
    {
        int from = 0;
        int to = parents.Count;
        if (!double.IsPositiveInfinity(errorRoom))
        {
            while (from < to && parents.Errors[from] + choice.Error > errorRoom)
            {
                from++;
            }
        }

        if (bytesRoom != long.MaxValue)
        {
            while (to > from && parents.Bytes[to - 1] > bytesRoom - choice.Bytes)
            {
                to--;
            }
        }

        return (from, to);
    }

    /// <summary>
    /// Merges the points so far with parents [from, to) extended by one choice, both sorted by bytes,
    /// and keeps only points whose error is strictly below every cheaper point's (the Pareto set).
    /// Equal (bytes, error) keeps the earlier, so results do not depend on anything but input order.
    /// </summary>
    private static void MergeInto(PointBuffer sofar, PointBuffer parents, int from, int to, PlanningChoice choice, uint choiceIndex, PointBuffer output)
    {
        output.EnsureCapacity(sofar.Count + (to - from));
        long[] aBytes = sofar.Bytes;
        double[] aErrors = sofar.Errors;
        uint[] aPack = sofar.Pack;
        long[] pBytes = parents.Bytes;
        double[] pErrors = parents.Errors;
        long[] oBytes = output.Bytes;
        double[] oErrors = output.Errors;
        uint[] oPack = output.Pack;
        long addBytes = choice.Bytes;
        double addError = choice.Error;

        int ia = 0, na = sofar.Count, ip = from, n = 0;
        double lastError = double.PositiveInfinity;
        while (ia < na || ip < to)
        {
            long bytes;
            double error;
            uint pack;
            bool takeSofar;
            if (ip >= to)
            {
                takeSofar = true;
            }
            else if (ia >= na)
            {
                takeSofar = false;
            }
            else
            {
                long pb = pBytes[ip] + addBytes;
                takeSofar = aBytes[ia] < pb || (aBytes[ia] == pb && aErrors[ia] <= pErrors[ip] + addError);
            }

            if (takeSofar)
            {
                bytes = aBytes[ia];
                error = aErrors[ia];
                pack = aPack[ia];
                ia++;
            }
            else
            {
                bytes = pBytes[ip] + addBytes;
                error = pErrors[ip] + addError;
                pack = ((uint)ip << ChoiceBits) | choiceIndex;
                ip++;
            }

            if (error < lastError)
            {
                oBytes[n] = bytes;
                oErrors[n] = error;
                oPack[n] = pack;
                n++;
                lastError = error;
            }
        }

        output.Count = n;
    }

    /// <summary>
    /// Thins a frontier to at most <paramref name="maxPoints"/> points and returns the relative bytes
    /// slack delta it used: walking from the most bytes down, a point is dropped when the last kept point
    /// has at most (1 + delta) times its bytes (and, being further along the frontier, less error). The
    /// cheapest and the least-error points always stay, so feasibility of any budget is unchanged.
    /// </summary>
    private static double Thin(PointBuffer points, int maxPoints)
    {
        int n = points.Count;
        long[] bytes = points.Bytes;
        double low = Math.Max(1.0, bytes[0]);
        double high = Math.Max(low, bytes[n - 1]);

        // This delta fits any spread of points in maxPoints; try much smaller ones first since real
        // frontiers are denser in some ranges than others.
        double sure = Math.Exp(Math.Log(high / low) / (maxPoints - 2)) - 1.0;
        double delta = Math.Max(sure / 64, 1e-12);
        while (CountKept(bytes, n, delta) > maxPoints)
        {
            delta *= 2;
        }

        int kept = 0;
        double anchor = bytes[n - 1];
        int write = n - 1;

        // Compact towards the end, then shift down, so the walk from the top needs no second buffer.
        for (int q = n - 1; q >= 0; q--)
        {
            if (q == n - 1 || q == 0 || bytes[q] * (1.0 + delta) < anchor)
            {
                if (q != n - 1)
                {
                    anchor = bytes[q];
                }

                points.Bytes[write] = points.Bytes[q];
                points.Errors[write] = points.Errors[q];
                points.Pack[write] = points.Pack[q];
                write--;
                kept++;
            }
        }

        Array.Copy(points.Bytes, write + 1, points.Bytes, 0, kept);
        Array.Copy(points.Errors, write + 1, points.Errors, 0, kept);
        Array.Copy(points.Pack, write + 1, points.Pack, 0, kept);
        points.Count = kept;
        return delta;
    }

    private static int CountKept(long[] bytes, int n, double delta)
    {
        int kept = n > 1 ? 2 : 1;
        double anchor = bytes[n - 1];
        for (int q = n - 2; q >= 1; q--)
        {
            if (bytes[q] * (1.0 + delta) < anchor)
            {
                anchor = bytes[q];
                kept++;
            }
        }

        return kept;
    }

    /// <summary>Frontier points as parallel arrays, grown on demand and reused across layers.</summary>
    private sealed class PointBuffer(int capacity)
    {
        public long[] Bytes = new long[capacity];
        public double[] Errors = new double[capacity];
        public uint[] Pack = new uint[capacity];
        public int Count;

        public void Clear() => Count = 0;

        public void Add(long bytes, double error, uint pack)
        {
            EnsureCapacity(Count + 1);
            Bytes[Count] = bytes;
            Errors[Count] = error;
            Pack[Count] = pack;
            Count++;
        }

        public void EnsureCapacity(int needed)
        {
            if (needed <= Bytes.Length)
            {
                return;
            }

            int size = Math.Max(needed, Bytes.Length * 2);
            Array.Resize(ref Bytes, size);
            Array.Resize(ref Errors, size);
            Array.Resize(ref Pack, size);
        }
    }
}
