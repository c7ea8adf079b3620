namespace Bitbudget.Service.Demo;

/// <summary>
/// Small deterministic random generator for the demo data, so the files do not depend on the
/// runtime's System.Random algorithm (which the runtime may change between versions).
/// </summary>
/// <remarks>
/// PCG32 "XSH RR" as published by M. E. O'Neill (2014, pcg-random.org): 64-bit LCG state with the
/// Knuth MMIX multiplier and a xorshift-high, random-rotate output. Constants from the published
/// reference implementation (quoted from memory).
/// </remarks>
internal sealed class Pcg32
{
    private const ulong Multiplier = 6364136223846793005UL;

    private ulong _state;
    private readonly ulong _increment;
    private double? _spareGaussian;

    public Pcg32(ulong seed, ulong stream = 54)
    {
        _increment = (stream << 1) | 1UL;
        _state = 0;
        NextUInt32();
        _state += seed;
        NextUInt32();
    }

    public uint NextUInt32()
    {
        ulong old = _state;
        _state = unchecked(old * Multiplier + _increment);
        uint xorShifted = (uint)(((old >> 18) ^ old) >> 27);
        int rotation = (int)(old >> 59);
        return (xorShifted >> rotation) | (xorShifted << ((-rotation) & 31));
    }

    /// <summary>Uniform in [0, 1) with 53 random bits.</summary>
    public double NextDouble()
    {
        ulong high = NextUInt32() >> 5;
        ulong low = NextUInt32() >> 6;
        return ((high << 26) | low) * (1.0 / (1UL << 53));
    }

    public double Uniform(double low, double high) => low + ((high - low) * NextDouble());

    /// <summary>Uniform integer in [0, exclusiveMax), unbiased by rejection.</summary>
    public int NextInt(int exclusiveMax)
    {
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(exclusiveMax);
        uint bound = (uint)exclusiveMax;
        uint threshold = unchecked(0u - bound) % bound;
        while (true)
        {
            uint r = NextUInt32();
            if (r >= threshold)
            {
                return (int)(r % bound);
            }
        }
    }

    /// <summary>Standard normal draw by the Box-Muller transform (Box and Muller, 1958), polar-free form.</summary>
    public double NextGaussian()
    {
        if (_spareGaussian is double spare)
        {
            _spareGaussian = null;
            return spare;
        }

        double u1 = 1.0 - NextDouble();
        double u2 = NextDouble();
        double radius = Math.Sqrt(-2.0 * Math.Log(u1));
        double angle = 2.0 * Math.PI * u2;
        _spareGaussian = radius * Math.Sin(angle);
        return radius * Math.Cos(angle);
    }

    public bool Chance(double probability) => NextDouble() < probability;
}
