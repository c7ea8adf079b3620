namespace Bitbudget.Service.Demo;

/// <summary>
/// Invents spectrogram patches of hive sound for the demo: every patch carries the colony's hum
/// (a fundamental band and its second harmonic) and noise; each state adds its own signature at a
/// random strength, and every state sometimes carries faint look-alikes of the others, so a few
/// patches stay ambiguous and a small network lands in the nineties rather than at 100%.
/// </summary>
internal sealed class HiveSoundSynthesizer
{
    public static readonly string[] ClassNames = ["calm", "swarm-preparing", "queenless", "intruder"];

    public const int ClassCount = 4;

    private const double NoiseLevel = 0.22;

    private readonly Pcg32 _random;

    public HiveSoundSynthesizer(ulong seed)
    {
        _random = new Pcg32(seed);
    }

    /// <summary>Generates <paramref name="count"/> patches with classes balanced (count / 4 each, the rest spread from class 0) in shuffled order.</summary>
    public HiveSoundSet Generate(int count)
    {
        ArgumentOutOfRangeException.ThrowIfNegative(count);
        var labels = new long[count];
        for (int i = 0; i < count; i++)
        {
            labels[i] = i % ClassCount;
        }

        // Fisher-Yates, so class order carries no signal and every mini-batch is mixed.
        for (int i = count - 1; i > 0; i--)
        {
            int j = _random.NextInt(i + 1);
            (labels[i], labels[j]) = (labels[j], labels[i]);
        }

        var spectrograms = new float[count * HiveSoundSet.PatchLength];
        var patch = new double[HiveSoundSet.PatchLength];
        for (int i = 0; i < count; i++)
        {
            Synthesize((HiveState)labels[i], patch);
            Span<float> target = spectrograms.AsSpan(i * HiveSoundSet.PatchLength, HiveSoundSet.PatchLength);
            for (int k = 0; k < patch.Length; k++)
            {
                target[k] = (float)patch[k];
            }
        }

        return new HiveSoundSet(spectrograms, labels);
    }

    private void Synthesize(HiveState state, double[] patch)
    {
        Array.Clear(patch);

        // Signature strength: mostly clear, sometimes faint enough to drown in the noise.
        double strength = 0.25 + (0.75 * Math.Pow(_random.NextDouble(), 0.6));

        double fundamental = _random.Uniform(2.5, 4.5);
        double humWidth = 0.9;
        double humLevel = _random.Uniform(0.6, 1.0);
        double wobbleDepth = _random.Uniform(0.0, 0.12);
        double wobblePeriod = _random.Uniform(6.0, 16.0);

        if (state == HiveState.Queenless)
        {
            // A queenless colony "moans": the hum rises, broadens and beats.
            fundamental += 1.2 * strength;
            humWidth += 0.6 * strength;
            wobbleDepth += 0.35 * strength;
            wobblePeriod = _random.Uniform(3.0, 6.0);
        }

        double wobblePhase = _random.Uniform(0.0, 2.0 * Math.PI);
        for (int frame = 0; frame < HiveSoundSet.Frames; frame++)
        {
            double level = humLevel * (1.0 + (wobbleDepth * Math.Sin((2.0 * Math.PI * frame / wobblePeriod) + wobblePhase)));
            for (int band = 0; band < HiveSoundSet.Bands; band++)
            {
                double hum = Bump(band, fundamental, humWidth) + (0.45 * Bump(band, 2.0 * fundamental, humWidth * 1.2));
                patch[Index(band, frame)] += level * hum;
            }
        }

        switch (state)
        {
            case HiveState.SwarmPreparing:
                AddPiping(patch, 1.1 * strength);
                break;
            case HiveState.Queenless:
                AddMidBandLift(patch, 0.45 * strength);
                break;
            case HiveState.Intruder:
                AddBursts(patch, 1.0 * strength);
                break;
            case HiveState.Calm:
            default:
                break;
        }

        // Faint look-alikes in any state: a passing bee's toot, a bump against the box, wind.
        if (_random.Chance(0.25))
        {
            AddPiping(patch, _random.Uniform(0.0, 0.25));
        }

        if (_random.Chance(0.25))
        {
            AddBursts(patch, _random.Uniform(0.0, 0.35));
        }

        if (_random.Chance(0.25))
        {
            AddMidBandLift(patch, _random.Uniform(0.0, 0.15));
        }

        for (int k = 0; k < patch.Length; k++)
        {
            patch[k] += NoiseLevel * _random.NextGaussian();
        }
    }

    /// <summary>Queens piping before a swarm: short tonal toots high in the spectrum, gliding upward.</summary>
    private void AddPiping(double[] patch, double amplitude)
    {
        int toots = 2 + _random.NextInt(2);
        for (int toot = 0; toot < toots; toot++)
        {
            int start = _random.NextInt(HiveSoundSet.Frames - 2);
            int length = 2 + _random.NextInt(3);
            double pitch = _random.Uniform(8.5, 12.0);
            for (int frame = start; frame < Math.Min(start + length, HiveSoundSet.Frames); frame++)
            {
                double glide = pitch + (0.35 * (frame - start));
                for (int band = 0; band < HiveSoundSet.Bands; band++)
                {
                    patch[Index(band, frame)] += amplitude * Bump(band, glide, 0.6);
                }
            }
        }
    }

    /// <summary>Broad, restless energy in the middle bands that comes and goes.</summary>
    private void AddMidBandLift(double[] patch, double amplitude)
    {
        double centre = _random.Uniform(6.5, 9.0);
        double period = _random.Uniform(3.0, 6.0);
        double phase = _random.Uniform(0.0, 2.0 * Math.PI);
        for (int frame = 0; frame < HiveSoundSet.Frames; frame++)
        {
            double swell = 0.5 * (1.0 + Math.Sin((2.0 * Math.PI * frame / period) + phase));
            for (int band = 0; band < HiveSoundSet.Bands; band++)
            {
                patch[Index(band, frame)] += amplitude * swell * Bump(band, centre, 2.2);
            }
        }
    }

    /// <summary>A wasp or mouse at the entrance: short broadband bursts that decay within a frame or two.</summary>
    private void AddBursts(double[] patch, double amplitude)
    {
        int bursts = 1 + _random.NextInt(3);
        for (int burst = 0; burst < bursts; burst++)
        {
            int frame = _random.NextInt(HiveSoundSet.Frames);
            int low = 1 + _random.NextInt(4);
            int high = 10 + _random.NextInt(HiveSoundSet.Bands - 10);
            double peak = amplitude * _random.Uniform(0.7, 1.0);
            for (int band = low; band <= high; band++)
            {
                patch[Index(band, frame)] += peak;
                if (frame + 1 < HiveSoundSet.Frames)
                {
                    patch[Index(band, frame + 1)] += 0.4 * peak;
                }
            }
        }
    }

    private static double Bump(double band, double centre, double width)
    {
        double d = (band - centre) / width;
        return Math.Exp(-0.5 * d * d);
    }

    private static int Index(int band, int frame) => (band * HiveSoundSet.Frames) + frame;
}
