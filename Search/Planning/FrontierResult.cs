using System.Collections;

namespace Bitbudget.Search.Planning;

/// <summary>
/// The size-vs-error Pareto frontier from the knapsack: points sorted by bytes ascending with error
/// strictly descending. Choices are kept as compact back-pointers and a point's
/// <see cref="Selection"/> is rebuilt when it is read, so a large frontier costs little until used.
/// </summary>
public sealed class FrontierResult : IReadOnlyList<Selection>
{
    private readonly uint[][] _back;
    private readonly long[] _bytes;
    private readonly double[] _errors;

    internal FrontierResult(uint[][] back, long[] bytes, double[] errors, bool exact, double bytesFactorBound)
    {
        _back = back;
        _bytes = bytes;
        _errors = errors;
        Exact = exact;
        BytesFactorBound = bytesFactorBound;
    }

    /// <summary>
    /// True when no thinning was needed: the points are exactly the Pareto-optimal (bytes, error) pairs.
    /// </summary>
    public bool Exact { get; }

    /// <summary>
    /// 1 when exact. After thinning, every exact Pareto point (bytes b, error e) still has a point here
    /// with error &lt;= e and bytes &lt;= b x this factor.
    /// </summary>
    public double BytesFactorBound { get; }

    /// <summary>Number of frontier points; 0 when a budget ruled out every assignment.</summary>
    public int Count => _bytes.Length;

    /// <summary>Bytes of each point, ascending.</summary>
    public IReadOnlyList<long> Bytes => _bytes;

    /// <summary>Summed additive error of each point, strictly descending.</summary>
    public IReadOnlyList<double> Errors => _errors;

    /// <summary>The assignment behind point <paramref name="index"/>.</summary>
    public Selection this[int index]
    {
        get
        {
            ArgumentOutOfRangeException.ThrowIfNegative(index);
            ArgumentOutOfRangeException.ThrowIfGreaterThanOrEqual(index, Count);
            var choice = new int[_back.Length];
            int point = index;
            for (int layer = _back.Length - 1; layer >= 0; layer--)
            {
                uint packed = _back[layer][point];
                choice[layer] = (int)(packed & KnapsackSolver.ChoiceMask);
                point = (int)(packed >> KnapsackSolver.ChoiceBits);
            }

            return new Selection(choice, _bytes[index], _errors[index]) { Thinned = !Exact };
        }
    }

    /// <summary>The point with the fewest bytes whose error is at most <paramref name="maxError"/>, or -1.</summary>
    public int IndexOfMinimumBytes(double maxError)
    {
        // Errors descend along the frontier, so the first point inside the budget has the fewest bytes.
        for (int i = 0; i < _errors.Length; i++)
        {
            if (_errors[i] <= maxError)
            {
                return i;
            }
        }

        return -1;
    }

    /// <summary>The point with the least error whose bytes are at most <paramref name="maxBytes"/>, or -1.</summary>
    public int IndexOfMinimumError(long maxBytes)
    {
        for (int i = _bytes.Length - 1; i >= 0; i--)
        {
            if (_bytes[i] <= maxBytes)
            {
                return i;
            }
        }

        return -1;
    }

    public IEnumerator<Selection> GetEnumerator()
    {
        for (int i = 0; i < Count; i++)
        {
            yield return this[i];
        }
    }

    IEnumerator IEnumerable.GetEnumerator() => GetEnumerator();
}
