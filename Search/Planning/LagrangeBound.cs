namespace Bitbudget.Search.Planning;

/// <summary>
/// Lets the knapsack drop partial points that cannot beat an assignment already in hand (the greedy
/// one), without losing exactness. The bound is the Lagrangian relaxation of the layers still to come:
/// for any multiplier w >= 0, whatever the remaining layers add to the objective under a room R on the
/// constrained total is at least sum_j min_c (objective_jc + w x constrained_jc) - w x R (weak duality).
/// The multiplier is the one that maximises this bound for the whole problem.
/// </summary>
internal sealed class LagrangeBound
{
    private readonly bool _bytesObjective;
    private readonly double[] _suffix;
    private readonly double _multiplier;
    private readonly double _limit;
    private readonly double _threshold;

    private LagrangeBound(IReadOnlyList<PlanningLayer> layers, bool bytesObjective, double limit, double incumbent)
    {
        _bytesObjective = bytesObjective;
        _limit = limit;
        _multiplier = BestMultiplier(layers, bytesObjective, limit);
        _suffix = new double[layers.Count + 1];
        for (int i = layers.Count - 1; i >= 0; i--)
        {
            _suffix[i] = _suffix[i + 1] + MinPenalised(layers[i].Choices, bytesObjective, _multiplier).Value;
        }

        // The bound mixes large byte counts with scaled errors; a relative slack keeps rounding from
        // dropping a point that ties the incumbent.
        double scale = Math.Abs(incumbent) + Math.Abs(_suffix[0]) + Math.Abs(_multiplier * limit);
        _threshold = incumbent + (1e-9 * scale) + (bytesObjective ? 0.5 : 0.0);
    }

    /// <summary>
    /// Whether <paramref name="choice"/> of layer <paramref name="layer"/> can be part of an assignment at least as good as
    /// the incumbent (reduced-cost fixing). For any feasible assignment x, objective(x) >= dual + sum_j r_j(x_j), where
    /// r_j(c) = objective_c + w x constrained_c - min over the layer's choices (&gt;= 0); so a choice whose reduced cost alone
    /// exceeds incumbent - dual cannot appear in an assignment that ties or beats the incumbent.
    /// </summary>
    public bool Admits(int layer, PlanningChoice choice)
    {
        double objective = _bytesObjective ? choice.Bytes : choice.Error;
        double constrained = _bytesObjective ? choice.Error : choice.Bytes;
        double reduced = objective + (_multiplier * constrained) - (_suffix[layer] - _suffix[layer + 1]);
        return reduced <= _threshold - LowerBound;
    }

    /// <summary>The Lagrangian lower bound on the whole problem's objective at the chosen multiplier.</summary>
    private double LowerBound => _suffix[0] - (_multiplier * _limit);

    /// <summary>For fewest bytes under an error budget, given an assignment of <paramref name="incumbentBytes"/> that meets it.</summary>
    public static LagrangeBound ForMinimumBytes(IReadOnlyList<PlanningLayer> layers, double maxError, long incumbentBytes) =>
        new(layers, bytesObjective: true, maxError, incumbentBytes);

    /// <summary>For least error under a size budget, given an assignment of <paramref name="incumbentError"/> that fits it.</summary>
    public static LagrangeBound ForMinimumError(IReadOnlyList<PlanningLayer> layers, long maxBytes, double incumbentError) =>
        new(layers, bytesObjective: false, maxBytes, incumbentError);

    /// <summary>True when every completion of a partial point over layers [nextLayer..] must be worse than the incumbent.</summary>
    public bool CannotImprove(int nextLayer, long bytes, double error)
    {
        double objective = _bytesObjective ? bytes : error;
        double used = _bytesObjective ? error : bytes;
        double lower = objective + _suffix[nextLayer] - (_multiplier * (_limit - used));
        return lower > _threshold;
    }

    /// <summary>
    /// Maximises the concave dual g(w) = sum_j min_c (objective + w x constrained) - w x limit by
    /// bisection on the sign of its subgradient (constrained total at the minimiser minus the limit),
    /// in log space since the two totals can differ by many orders of magnitude.
    /// </summary>
    private static double BestMultiplier(IReadOnlyList<PlanningLayer> layers, bool bytesObjective, double limit)
    {
        (double g0, double slope0) = Dual(layers, bytesObjective, limit, 0.0);
        if (slope0 <= 0)
        {
            return 0.0;
        }

        double best = 0.0, bestValue = g0;
        double low = -60, high = 60;
        for (int iteration = 0; iteration < 200 && high - low > 1e-12; iteration++)
        {
            double mid = 0.5 * (low + high);
            double w = Math.Pow(10, mid);
            (double g, double slope) = Dual(layers, bytesObjective, limit, w);
            if (g > bestValue)
            {
                bestValue = g;
                best = w;
            }

            if (slope > 0)
            {
                low = mid;
            }
            else
            {
                high = mid;
            }
        }

        return best;
    }

    private static (double Value, double Slope) Dual(IReadOnlyList<PlanningLayer> layers, bool bytesObjective, double limit, double w)
    {
        double value = -w * limit;
        double used = -limit;
        foreach (PlanningLayer layer in layers)
        {
            (double penalised, double constrained) = MinPenalised(layer.Choices, bytesObjective, w);
            value += penalised;
            used += constrained;
        }

        return (value, used);
    }

    private static (double Value, double Constrained) MinPenalised(IReadOnlyList<PlanningChoice> choices, bool bytesObjective, double w)
    {
        double best = double.PositiveInfinity, constrained = double.PositiveInfinity;
        foreach (PlanningChoice c in choices)
        {
            double objective = bytesObjective ? c.Bytes : c.Error;
            double con = bytesObjective ? c.Error : c.Bytes;
            double value = objective + (w * con);
            if (value < best || (value == best && con < constrained))
            {
                best = value;
                constrained = con;
            }
        }

        return (best, constrained);
    }
}
